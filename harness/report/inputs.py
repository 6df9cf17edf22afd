"""The inputs of a report: results files and folders of stored runs, loaded and checked, and
the views of them that every part of the report shares (merged time rows, the cases of a
history)."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

from fftgauge.harness.cases import Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.results import (CHECK_SCHEMA, GATE_SCHEMA, TIME_SCHEMA, incomplete_note, load_results,
                                      validate_results)
from fftgauge.harness.selection.run import PICK_SCHEMA

#: Most history plots drawn per folder when no case is chosen.
MAX_HISTORY_PLOTS = 6


@dataclass
class ReportInputs:
    """What the command was given, loaded and checked: (path, document) pairs per schema,
    (folder, documents) histories, and a note per file from a run that did not complete.

    A pick file (``fftgauge-pick/1``) is kept in ``pick``, and the battery and timing
    documents it holds as evidence join ``check`` and ``time`` (named ``PATH (pick's
    battery)`` and ``PATH (pick's timing)``).
    """

    time: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    check: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    histories: list[tuple[str, list[dict[str, Any]]]] = field(default_factory=list)
    pick: list[tuple[str, dict[str, Any]]] = field(default_factory=list)
    incomplete: list[str] = field(default_factory=list)


def load_inputs(paths: list[str]) -> ReportInputs:
    """Return the loaded inputs of ``paths`` (files or folders).

    Raises
    ------
    UsageError
        For a missing, corrupt, hostile or foreign file (naming it and the field,
        :func:`fftgauge.harness.results.load_results`), a gate file given on its own
        (gate runs are a history: pass their folder), or a folder without results files.
    """
    inputs = ReportInputs()
    for path in paths:
        if os.path.isdir(path):
            names = sorted(f for f in os.listdir(path) if f.endswith(".json"))
            if not names:
                raise UsageError(f"folder {path!r} holds no results files (*.json); pass results files or a "
                                 f"folder of stored runs")
            docs = []
            for name in names:
                docs.append(load_results(os.path.join(path, name), (TIME_SCHEMA, GATE_SCHEMA)))
                note = incomplete_note(os.path.join(path, name), docs[-1])
                if note:
                    inputs.incomplete.append(note)
            inputs.histories.append((path, docs))
            continue
        doc = load_results(path, (TIME_SCHEMA, CHECK_SCHEMA, GATE_SCHEMA, PICK_SCHEMA))
        if doc["schema"] == PICK_SCHEMA:
            add_pick(inputs, path, doc)
            continue
        note = incomplete_note(path, doc)
        if note:
            inputs.incomplete.append(note)
        if doc["schema"] == GATE_SCHEMA:
            raise UsageError(f"results file {path!r} is a gate run: gate runs are plotted as a history; pass the "
                             f"folder that holds them")
        (inputs.time if doc["schema"] == TIME_SCHEMA else inputs.check).append((path, doc))
    return inputs


def add_pick(inputs: ReportInputs, path: str, doc: dict[str, Any]) -> None:
    """Add a pick document and its evidence (battery and timing documents) to ``inputs``.

    Raises
    ------
    UsageError
        When a ranking row or an evidence document is not what ``fftgauge pick`` writes.
    """
    from fftgauge.harness.selection.table import candidates_of

    try:
        candidates_of(doc["rows"])
        summary = [str(s) for s in doc.get("summary") or []]
    except (TypeError, KeyError, AttributeError) as exc:
        raise UsageError(f"results file {path!r}: a ranking row is not what fftgauge pick writes ({exc}); the "
                         f"file is corrupt or was edited") from None
    inputs.pick.append((path, {**doc, "summary": summary}))
    evidence = doc.get("evidence") if isinstance(doc.get("evidence"), dict) else {}
    for key, schema, target, words in (("check", CHECK_SCHEMA, inputs.check, "pick's battery"),
                                       ("time", TIME_SCHEMA, inputs.time, "pick's timing")):
        part = evidence.get(key)
        if not isinstance(part, dict) or not part.get("rows"):
            continue  # a pick that timed nothing keeps an empty timing document without an envelope
        name = f"{path} ({words})"
        validate_results(name, part, (schema,))
        target.append((name, part))


def parse_case(text: str) -> Case:
    """Return the case written as ``KIND,DTYPE,N`` or ``KIND,DTYPE,N,NORM``.

    Raises
    ------
    UsageError
        When the text is not of that form or names an unknown kind, precision or norm.
    """
    parts = [p.strip() for p in text.split(",")]
    if len(parts) not in (3, 4) or not parts[2].isdigit():
        raise UsageError(f"--case {text!r}: write KIND,DTYPE,N[,NORM], e.g. fft,float64,1024")
    try:
        return Case(parts[0], parts[1], int(parts[2]), *(parts[3:] or ["backward"]))
    except ValueError as exc:
        raise UsageError(f"--case {text!r}: {exc}") from None


def file_stem(path: str) -> str:
    """Return the file or folder name of ``path`` without its extension (``results`` when empty)."""
    return os.path.splitext(os.path.basename(os.path.normpath(path)))[0] or "results"


def run_tags(time_docs: list[tuple[str, dict[str, Any]]]) -> dict[str, str]:
    """Return a short tag per time file (``A``, ``B``, ... in the order given; ``A2`` past ``Z``)
    when two files time the same backend and case, else {} (the backends' names suffice)."""
    keys: dict[tuple, str] = {}
    clash = False
    for path, doc in time_docs:
        for row in doc["rows"]:
            key = (row["backend"], row["kind"], row["dtype"], row["n"], row.get("threads"), row.get("norm"))
            if keys.setdefault(key, path) != path:
                clash = True
    if not clash:
        return {}
    letters = [chr(ord("A") + i % 26) + (str(i // 26 + 1) if i >= 26 else "") for i in range(len(time_docs))]
    return {path: tag for (path, _), tag in zip(time_docs, letters)}


def merged_time_rows(time_docs: list[tuple[str, dict[str, Any]]]) -> list[dict[str, Any]]:
    """Return the rows of every time file together; when two files time the same backend and
    case, each row's backend becomes ``backend [tag]`` (:func:`run_tags`) so that the runs
    stay apart with short labels."""
    tags = run_tags(time_docs)
    rows = []
    for path, doc in time_docs:
        for row in doc["rows"]:
            rows.append({**row, "backend": f"{row['backend']} [{tags[path]}]"} if tags else dict(row))
    return rows


def history_cases(docs: list[dict[str, Any]], limit: int = MAX_HISTORY_PLOTS) -> tuple[list[Case], int]:
    """Return up to ``limit`` cases held by every run (else by the newest), spread evenly, and how many there were.

    Only 1-D rows make history cases: rows of shaped cases (a ``shape``, saved by
    ``fftgauge gate --shapes --save``) are left out."""
    def cases_of(doc: dict[str, Any]) -> set[Case]:
        return {Case(r["kind"], r["dtype"], r["n"], r.get("norm", "backward")) for r in doc["rows"]
                if not r.get("shape")}

    docs = [d for d in docs if cases_of(d)]
    common = set.intersection(*(cases_of(d) for d in docs)) if docs else set()
    if not common and docs:
        common = cases_of(max(docs, key=lambda d: str(d.get("created") or "")))
    ordered = sorted(common)
    if len(ordered) <= limit:
        return ordered, len(ordered)
    step = (len(ordered) - 1) / (limit - 1)
    return [ordered[round(i * step)] for i in range(limit)], len(ordered)

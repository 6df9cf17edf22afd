"""Stored runs: loading and checking the results files a baseline is formed from, the per-case
baselines taken from them, and saving a run into a history folder.

A stored run is a ``fftgauge time`` or ``fftgauge gate`` results file (:class:`StoredRun`,
validated once by :func:`load_stored_run`); a history is a folder of them, of which the runs
measured on this machine (:data:`MACHINE_KEYS` of the fingerprint) are used, the last K by
creation time (:func:`load_stored_runs`). A case's baseline is the summary of the runs that
hold it (:func:`baseline_for`, :func:`ratio_baseline_for`, with the method of
:func:`fftgauge.harness.gate.estimates.stored_baseline`).

A stored row is keyed by its case (:func:`case_of`): kind, precision, ``n`` and norm for a 1-D
row (every row of a file written before shaped cases), and kind, precision, shape, axes,
layout and norm for a row with a ``shape`` (``fftgauge time --shapes``, ``fftgauge gate
--shapes``), so a shaped case and a 1-D case of the same ``n`` never share a baseline.
"""

from __future__ import annotations

import datetime as dt
import os
from collections import Counter
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Sequence

from fftgauge.harness.cases import DTYPES, KINDS, NORMS, Case
from fftgauge.harness.errors import UsageError
from fftgauge.harness.shapes.case import SHAPE_KINDS, ShapeCase, family_kind

if TYPE_CHECKING:  # the estimates import scipy.stats: not at the command line's start-up
    from fftgauge.harness.gate.estimates import StoredBaseline

GATE_SCHEMA = "fftgauge-gate/1"
TIME_SCHEMA = "fftgauge-time/1"
#: Machine fingerprint fields that must agree with a stored baseline's (see docs/ci-gate.md).
MACHINE_KEYS = ("cpu", "cores", "caches", "machine", "python")
#: Default number of stored runs whose per-case median forms the baseline.
DEFAULT_LAST_RUNS = 5


@dataclass(frozen=True)
class StoredRun:
    """A stored results document the gate can take a baseline from (validated at load).

    ``rows`` are the usable rows (a positive ``seconds``); ``backends`` maps a row's backend
    label to the SPEC that produced it; ``yardstick`` is the run's record or None;
    ``complete`` is false for a run stopped before its end (its envelope says so).
    """

    path: str
    created: str
    schema: str
    machine: dict[str, Any]
    yardstick: dict[str, Any] | None
    rows: tuple[dict[str, Any], ...]
    backends: dict[str, str]
    complete: bool = True


def case_of(row: dict[str, Any]) -> Case | ShapeCase:
    """Return the case a stored row describes: a :class:`~fftgauge.harness.cases.Case` for a
    1-D row, a :class:`~fftgauge.harness.shapes.case.ShapeCase` for a row with a ``shape``
    (keyed by kind, precision, shape, axes, layout and norm; ``n`` is N, derived). Norm
    ``backward`` and layout ``C`` when absent.

    Raises
    ------
    ValueError, TypeError, KeyError
        For a row no case can be built from (the loaders turn this into a corrupt-file error).
    """
    norm = row.get("norm") or "backward"
    if row.get("shape") is not None:
        return ShapeCase(row["kind"], row["dtype"], tuple(int(v) for v in row["shape"]),
                         tuple(int(a) for a in row["axes"]), row.get("layout") or "C", norm)
    return Case(row["kind"], row["dtype"], int(row["n"]), norm)


def case_order_key(case: Case | ShapeCase) -> tuple:
    """Return the sort key of a stored case: 1-D kinds first, then the shaped ones (the 1-D names
    of a batch, then the ``n`` names), precision, norm, N, then shape, axes and layout."""
    if isinstance(case, ShapeCase):
        return (len(KINDS) + SHAPE_KINDS.index(case.kind), case.dtype, case.norm, case.points, case.shape,
                case.axes, case.layout)
    return (KINDS.index(case.kind), case.dtype, case.norm, case.n, (), (), "")


def stored_cases(runs: Sequence[StoredRun], label: str, kinds: Sequence[str] | None = None,
                 dtypes: Sequence[str] | None = None, sizes: Sequence[int] | None = None,
                 shapes: Sequence[Any] | None = None,
                 layouts: Sequence[str] | None = None) -> list[Case | ShapeCase]:
    """Return the cases the stored runs hold for backend ``label``, in :func:`case_order_key` order.

    Without ``sizes`` and ``shapes`` every stored case, 1-D and shaped; ``sizes`` keeps the 1-D
    cases of those sizes, ``shapes`` (items of the ``--shapes`` grammar,
    :class:`~fftgauge.harness.shapes.grammar.ShapeSpec`) the shaped cases of those shapes and
    axes (``layouts``, when given, of those layouts). ``kinds`` and ``dtypes`` filter both when
    given; a kind names its family's form for the case's axis count (``fft`` keeps ``fftn``
    cases of a 2-D shape, as ``--kinds`` does for ``--shapes``).
    """
    cases = {case_of(r) for run in runs for r in run.rows if r["backend"] == label}
    if kinds:
        cases = {c for c in cases if c.kind in kinds
                 or (isinstance(c, ShapeCase) and c.kind in {family_kind(k, len(c.axes)) for k in kinds})}
    if dtypes:
        cases = {c for c in cases if c.dtype in dtypes}
    if sizes:
        cases = {c for c in cases if isinstance(c, Case) and c.n in sizes}
    if shapes:
        wanted = {(tuple(s.shape), tuple(s.axes)) for s in shapes}
        cases = {c for c in cases if isinstance(c, ShapeCase) and (c.shape, c.axes) in wanted
                 and (not layouts or c.layout in layouts)}
    return sorted(cases, key=case_order_key)


def shapes_not_stored(runs: Sequence[StoredRun], label: str, shapes: Sequence[Any]) -> list[str]:
    """Return the ``--shapes`` items (their grammar labels) of which the stored runs hold no
    case of backend ``label`` at all, in the order given."""
    held = {(c.shape, c.axes) for c in stored_cases(runs, label) if isinstance(c, ShapeCase)}
    return [s.label() for s in shapes if (tuple(s.shape), tuple(s.axes)) not in held]


def baseline_for(runs: Sequence[StoredRun], label: str, case: Case,
                 confidence: float) -> tuple[StoredBaseline, StoredBaseline | None, dict[str, Any] | None]:
    """Return the case's (raw baseline, yardstick-corrected baseline or None, newest accuracy record or None).

    The corrected one exists when every run holding the case has a comparable yardstick.
    """
    from fftgauge.harness.gate.estimates import common_statistic, stat_triple, stored_baseline
    from fftgauge.harness.gate.yardstick import comparable

    holding = []
    for run in runs:
        for row in run.rows:
            if row["backend"] == label and case_of(row) == case:
                holding.append((run, row))
                break
    statistic = common_statistic([r for _, r in holding])
    values = [stat_triple(r, statistic) for _, r in holding]
    medians = [float(r["seconds"]) for _, r in holding]
    raw = stored_baseline(values, None, confidence, statistic, medians=medians)
    corrected = None
    if all(comparable(run.yardstick) for run, _ in holding):
        records = [run.yardstick for run, _ in holding]
        yard_statistic = common_statistic(records)
        corrected = stored_baseline(values, [stat_triple(y, yard_statistic) for y in records], confidence,
                                    statistic, yard_statistic, medians=medians)
    accuracy = None
    for run, row in reversed(holding):  # runs are oldest first
        if row.get("battery_failures") is not None:
            accuracy = {"eps_units": row.get("eps_units"), "battery_failures": row.get("battery_failures")}
            break
    return raw, corrected, accuracy


def ratio_baseline_for(runs: Sequence[StoredRun], label: str, reference: str, case: Case,
                       confidence: float) -> StoredBaseline | None:
    """Return the stored A/B ratios of ``label`` against ``reference`` for ``case`` as a
    baseline, or None when no stored run holds one.

    A row's ratio is ``ab_ratio``/``ab_ratio_low``/``ab_ratio_high`` (written by A/B and
    referenced runs), or for A/B rows of older files their ``ratio`` fields; only rows whose
    ``baseline_backend`` is ``reference`` count.
    """
    from fftgauge.harness.gate.estimates import stat_triple, stored_baseline

    values = []
    for run in runs:
        for row in run.rows:
            if row["backend"] != label or row.get("baseline_backend") != reference or case_of(row) != case:
                continue
            triple = stat_triple(row, "ab_ratio")
            if triple is None and row.get("baseline_runs") is None:
                triple = stat_triple(row, "ratio")
            if triple is not None:
                values.append(triple)
            break
    if not values:
        return None
    return stored_baseline(values, None, confidence, statistic="ab_ratio")


def machine_differences(stored: Any, current: dict[str, Any]) -> list[str]:
    """Return ``"key: stored -> current"`` for each :data:`MACHINE_KEYS` field that differs."""
    stored = stored if isinstance(stored, dict) else {}
    return [f"{key}: {stored.get(key)!r} -> {current.get(key)!r}" for key in MACHINE_KEYS
            if stored.get(key) != current.get(key)]


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _integers(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, int) and not isinstance(v, bool)
                                                          for v in value)


def check_stored_case(path: str, i: int, row: dict[str, Any]) -> None:
    """Check that row ``i`` of the stored file ``path`` names a possible case: a 1-D one (kind,
    precision, norm, a positive integer ``n``) or, with a ``shape``, a shaped one (``shape`` and
    ``axes`` lists of integers that make a :class:`~fftgauge.harness.shapes.case.ShapeCase`
    with its ``kind``, precision, ``layout`` and norm); return nothing.

    Raises
    ------
    UsageError
        For a row that lacks a case field or holds an impossible case (the file is corrupt).
    """
    missing = [k for k in ("backend", "kind", "dtype", "n") if k not in row]
    if missing:
        raise UsageError(f"baseline {path!r}: row {i} lacks {', '.join(missing)}; the file is corrupt or was edited")
    n = row["n"]
    if row.get("shape") is not None:
        try:
            ok = (isinstance(row["backend"], str) and _integers(row["shape"]) and _integers(row.get("axes"))
                  and isinstance(case_of(row), ShapeCase))
        except (ValueError, TypeError, KeyError):
            ok = False
        if not ok:
            raise UsageError(f"baseline {path!r}: row {i} holds an impossible shaped case ({row.get('backend')!r}, "
                             f"{row.get('kind')!r}, {row.get('dtype')!r}, shape={row.get('shape')!r}, "
                             f"axes={row.get('axes')!r}, layout={row.get('layout')!r}); the file is corrupt")
        return
    if (not isinstance(row["backend"], str) or row["kind"] not in KINDS or row["dtype"] not in DTYPES
            or (row.get("norm") or "backward") not in NORMS or not isinstance(n, int) or isinstance(n, bool)
            or n < 1):
        raise UsageError(f"baseline {path!r}: row {i} holds an impossible case ({row.get('backend')!r}, "
                         f"{row.get('kind')!r}, {row.get('dtype')!r}, n={n!r}); the file is corrupt")


def _usable_rows(path: str, doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Return the rows of a stored doc that hold a time, after checking their fields.

    Raises
    ------
    UsageError
        For a row that is not an object or holds an impossible case or time.
    """
    rows = []
    for i, row in enumerate(doc["rows"]):
        if not isinstance(row, dict):
            raise UsageError(f"baseline {path!r}: row {i} is not an object; the file is corrupt")
        if row.get("status", "ok") != "ok" or row.get("seconds") is None:
            continue
        check_stored_case(path, i, row)
        if not _number(row["seconds"]) or any(row.get(k) is not None and not _number(row.get(k))
                                              for k in ("seconds_low", "seconds_high", "seconds_p10",
                                                        "seconds_p10_low", "seconds_p10_high")):
            raise UsageError(f"baseline {path!r}: row {i} has a non-numeric time; the file is corrupt")
        if row["seconds"] > 0:
            rows.append(row)
    return rows


def load_stored_run(path: str) -> StoredRun:
    """Load and check one stored results file.

    Raises
    ------
    UsageError
        When it is missing, unreadable, not JSON, of another schema, or has corrupt rows.
    """
    from fftgauge.harness.results import load_results

    doc = load_results(path, (TIME_SCHEMA, GATE_SCHEMA))
    rows = _usable_rows(path, doc)
    backends = {}
    for label, info in (doc.get("backends") or {}).items():
        if isinstance(info, dict) and isinstance(info.get("spec"), str):
            backends[label] = info["spec"]
    yardstick = doc.get("yardstick") if isinstance(doc.get("yardstick"), dict) else None
    return StoredRun(path=path, created=str(doc.get("created") or ""), schema=doc["schema"],
                     machine=doc.get("machine") if isinstance(doc.get("machine"), dict) else {},
                     yardstick=yardstick, rows=tuple(rows), backends=backends,
                     complete=doc.get("complete") is not False)


def load_stored_runs(path: str, last_k: int, allow_other_machine: bool) -> tuple[tuple[StoredRun, ...], list[str], list[str]]:
    """Return the stored runs a baseline is formed from, with warnings and notes for the report.

    A file is one run. A folder's runs are its ``*.json`` files (``fftgauge time`` or
    ``fftgauge gate`` results); those measured on this machine (:data:`MACHINE_KEYS` of the
    fingerprint) are kept, the last ``last_k`` by creation time are used, oldest first.

    Raises
    ------
    UsageError
        For a missing path, a corrupt or foreign file, no timed rows, or a baseline of
        another machine without ``allow_other_machine``.
    """
    from fftgauge.harness.results import machine_fingerprint

    here = machine_fingerprint()
    warnings: list[str] = []
    notes: list[str] = []
    if os.path.isdir(path):
        names = sorted(f for f in os.listdir(path) if f.endswith(".json"))
        if not names:
            raise UsageError(f"baseline folder {path!r} holds no stored runs (*.json); seed it with "
                             f"fftgauge gate --backend SPEC --save {path}")
        runs = [load_stored_run(os.path.join(path, name)) for name in names]
        timed = [r for r in runs if r.rows]
        if not timed:
            raise UsageError(f"baseline folder {path!r} holds no timed rows; seed it with "
                             f"fftgauge gate --backend SPEC --save {path}")
        timed.sort(key=lambda r: (r.created, r.path))
        same = [r for r in timed if not machine_differences(r.machine, here)]
        if not same:
            diff = "; ".join(machine_differences(timed[-1].machine, here))
            if not allow_other_machine:
                raise UsageError(f"none of the {len(timed)} stored runs in {path!r} was measured on this machine "
                                 f"({diff}); record a baseline here, or pass --allow-other-machine")
            warnings.append(f"the baseline was measured on ANOTHER MACHINE ({diff}): timing differences may be "
                            f"the machine's, not the code's")
            same = timed
        elif len(same) < len(timed):
            notes.append(f"{len(timed) - len(same)} stored run(s) of other machines in {path!r} ignored")
        used = same[-last_k:]
        _note_incomplete(used, notes)
        if len(used) < 3:
            notes.append(f"the baseline has {len(used)} stored run(s): with fewer than 3 the run-to-run variation "
                         f"cannot be estimated and only the yardstick guards against it")
        return tuple(used), warnings, notes
    if not os.path.exists(path):
        raise UsageError(f"baseline {path!r} does not exist; give a fftgauge time results file or a folder of "
                         f"stored runs")
    run = load_stored_run(path)
    if not run.rows:
        raise UsageError(f"baseline {path!r} holds no timed rows (every row is an error or a skip)")
    diff = machine_differences(run.machine, here)
    if diff:
        if not allow_other_machine:
            raise UsageError(f"baseline {path!r} was measured on another machine ({'; '.join(diff)}); "
                             f"measure a baseline here, or pass --allow-other-machine")
        warnings.append(f"the baseline was measured on ANOTHER MACHINE ({'; '.join(diff)}): timing differences "
                        f"may be the machine's, not the code's")
    _note_incomplete((run,), notes)
    notes.append("a single baseline file cannot show run-to-run variation; a folder of stored runs "
                 "(--save DIR, --baseline DIR) makes the comparison sturdier")
    return (run,), warnings, notes


def _note_incomplete(runs: Sequence[StoredRun], notes: list[str]) -> None:
    """Append a note naming the stored runs that did not complete (their finished rows are used)."""
    partial = [os.path.basename(r.path) for r in runs if not r.complete]
    if partial:
        notes.append(f"{len(partial)} stored run(s) did not complete ({', '.join(partial)}): only the cases "
                     f"they finished are in the baseline")


def default_specs_of(runs: tuple[StoredRun, ...]) -> tuple[str, ...]:
    """Return the SPECs of the backends the stored runs name (their label when no SPEC was stored)."""
    labels = sorted({r["backend"] for run in runs for r in run.rows})
    specs = {}
    for label in labels:
        for run in reversed(runs):
            if label in run.backends:
                specs[label] = run.backends[label]
                break
        specs.setdefault(label, label)
    return tuple(dict.fromkeys(specs[label] for label in labels))


def stored_threads(runs: tuple[StoredRun, ...]) -> int:
    """Return the thread count most stored rows were measured with (1 when none says)."""
    threads = Counter(r.get("threads") for run in runs for r in run.rows if isinstance(r.get("threads"), int))
    return threads.most_common(1)[0][0] if threads else 1


# -- saving ------------------------------------------------------------------------------------
def save_run(doc: dict[str, Any], folder: str) -> str:
    """Write ``doc`` into ``folder`` as ``gate-<UTC time with microseconds>.json``; return the path.

    Raises
    ------
    UsageError
        When the folder cannot be written.
    """
    from fftgauge.harness.results import dumps, write_text_atomic

    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%d-%H%M%S-%f")
    path = os.path.join(folder, f"gate-{stamp}.json")
    write_text_atomic(path, dumps(doc))
    return path



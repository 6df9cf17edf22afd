"""The gate's run: the items of a request, the worker processes that sample them, the rows
and the ``fftgauge-gate/1`` document, and the outputs written however the run ends.

Modes (:data:`fftgauge.harness.gate.request.MODES`)
-------------------------------------------------
- **A/B** (``old`` and ``new`` SPECs): both are measured in this run, block pair by block pair
  in a random order (:class:`fftgauge.harness.gate.sampling.WorkerSampler`); per case the estimate is
  formed from the pairs (:mod:`fftgauge.harness.gate.estimates`).
- **Stored** (a ``fftgauge time`` file, or a folder of stored runs): only the candidate is
  measured; the baseline of a case is a per-case summary of the last K stored runs
  (:mod:`fftgauge.harness.gate.history`), corrected by the yardstick when every stored run has one.
- **Referenced** (``old`` and ``new`` SPECs and a folder of saved A/B runs): measured exactly as
  A/B, with ``old`` a fixed reference implementation; this run's A/B ratio is then compared
  with the stored runs' A/B ratios of the same pair.
- **Record** (candidates and a folder to save to, nothing to compare): measures and stores.

The sampling loop is :mod:`fftgauge.harness.gate.adaptive`, the verdicts
:mod:`fftgauge.harness.gate.decision`, the outputs :mod:`fftgauge.harness.gate.outputs`.
"""

from __future__ import annotations

import sys
import time
from typing import Any, Callable, Sequence

import numpy as np

from fftgauge.harness.cases import KINDS, Case
from fftgauge.harness.errors import BackendFailure, UnsupportedCase, UsageError
from fftgauge.harness.gate.adaptive import GateItem, collect, finalise, yardstick_summary
from fftgauge.harness.gate.decision import compare_accuracy, outcome_of, undecided
from fftgauge.harness.gate.estimates import STATISTICS, common_statistic, sample_statistic
from fftgauge.harness.gate.history import (GATE_SCHEMA, baseline_for, case_of, case_order_key, ratio_baseline_for,
                                           save_run, shapes_not_stored, stored_cases)
from fftgauge.harness.gate.request import GateRequest, GateSettings
from fftgauge.harness.rows import GateRow
from fftgauge.harness.shapes.fields import case_size, row_fields


def request_cases(req: GateRequest) -> list[Case]:
    """Return the A/B or record mode's cases: kinds x dtypes x norms x sizes, or the shaped cases of ``--shapes``."""
    if req.shape_cases:
        return list(req.shape_cases)
    kinds = req.kinds or KINDS
    return [Case(k, d, n, norm) for k in kinds for d in (req.dtypes or ("float64",)) for norm in req.norms
            for n in (req.sizes or ())]


def build_items(req: GateRequest, sampler: Any, doc: dict[str, Any]) -> list[GateItem]:
    """Return the items of the request, skipped ones included, and record the backends in ``doc``.

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded, or (stored mode) a backend has no rows in the baseline.
    """
    if req.mode in ("ab", "referenced"):
        cases = request_cases(req)
        old = sampler.claims("old", cases)
        new = sampler.claims("new", cases)
        doc["old"] = old.record(req.old_spec)
        doc["new"] = new.record(req.new_spec)
        doc["backends"] = {new.label: new.record(req.new_spec)}
        items = []
        for i, case in enumerate(cases):
            it = GateItem(backend=new.label, case=case, new_key="new", old_key="old",
                          baseline_backend=old.label)
            reason = new.reasons[i] or old.reasons[i]
            if reason is not None:
                side = "new" if new.reasons[i] else "old"
                it.status, it.message = "skip", f"{side} backend: {reason}"
            elif req.mode == "referenced":
                stored_label = req.baseline_label or new.label
                it.baseline = ratio_baseline_for(req.stored_runs, stored_label, old.label, case,
                                                 req.settings.confidence)
                if it.baseline is None:
                    it.status, it.message = "skip", (f"no stored A/B ratio of {stored_label} against "
                                                     f"{old.label} for this case in the baseline")
            items.append(it)
        if req.mode == "referenced" and not any(it.baseline is not None for it in items):
            held = sorted({f"{r['backend']} against {r.get('baseline_backend')}" for run in req.stored_runs
                           for r in run.rows if r.get("baseline_backend")})
            raise UsageError(f"the baseline holds no A/B ratio of {req.baseline_label or new.label} against "
                             f"{old.label} for the cases asked (it holds: {', '.join(held) or 'none'}); "
                             f"use the same --old, or --baseline-backend LABEL for the stored candidate's label")
        return items
    items = []
    doc["backends"] = {}
    stored_labels = sorted({r["backend"] for run in req.stored_runs for r in run.rows})
    for spec in req.specs:
        if req.mode == "record":
            cases = request_cases(req)
        else:
            cases = sorted({case_of(r) for run in req.stored_runs for r in run.rows}, key=case_order_key)
        claims = sampler.claims(spec, cases)
        label = claims.label
        if label in doc["backends"]:  # two SPECs, one label: exit 2 naming it
            from fftgauge.backends.registry import require_unique_labels
            require_unique_labels({doc["backends"][label]["spec"]: label, spec: label})
        doc["backends"][label] = claims.record(spec)
        base_label = req.baseline_label or label
        if req.mode == "stored":
            if base_label not in stored_labels:
                raise UsageError(f"the baseline holds no timed rows of backend {base_label!r} (it holds: "
                                 f"{', '.join(stored_labels) or 'none'}); pass --backend with one of those, or "
                                 f"--baseline-backend LABEL to compare with another one's rows")
            wanted = stored_cases(req.stored_runs, base_label, req.kinds, req.dtypes, req.sizes, req.shape_specs,
                                  req.layouts)
            if not wanted:
                options = "--kinds/--dtypes/" + ("--shapes/--layouts" if req.shape_specs else "--sizes")
                raise UsageError(f"no stored case of backend {base_label!r} matches {options}; "
                                 f"drop those options to re-measure every stored case")
            absent = shapes_not_stored(req.stored_runs, base_label, req.shape_specs)
            if absent:
                doc["notes"].append(f"not in the baseline of {base_label}, so not gated: {', '.join(absent)} "
                                    f"(record them with fftgauge gate --backend SPEC --shapes ... --save DIR)")
        else:
            wanted = cases
        reasons = dict(zip(cases, claims.reasons))
        for case in wanted:
            it = GateItem(backend=label, case=case, new_key=spec,
                          baseline_backend=base_label if req.mode == "stored" else None)
            if reasons.get(case) is not None:
                it.status = "skip"
                it.message = (f"in the baseline but no longer supported: {reasons[case]}" if req.mode == "stored"
                              else reasons[case])
            elif req.mode == "stored" and req.settings.metric != "instructions":  # stored counts: gate.counted
                raw, corrected, acc = baseline_for(req.stored_runs, base_label, case, req.settings.confidence)
                it.baseline_raw, it.baseline, it.baseline_accuracy = raw, corrected or raw, acc
            items.append(it)
    return items


def new_doc(req: GateRequest) -> dict[str, Any]:
    """Return the run's ``fftgauge-gate/1`` envelope with the request recorded and no rows yet."""
    from fftgauge.harness.results import envelope

    s = req.settings
    extra = {
        "mode": req.mode, "regressed": False, "outcome": "incomplete", "complete": False,
        "inconclusive_policy": s.inconclusive,
        "threshold": s.threshold, "alpha": s.alpha, "confidence": s.confidence, "budget_seconds": s.budget_seconds,
        "threads": req.threads, "pinned_cpus": list(req.cpus) if req.cpus else None,
        "request": {"old": req.old_spec, "new": req.new_spec, "backends": list(req.specs),
                    "kinds": list(req.kinds) if req.kinds else None,
                    "dtypes": list(req.dtypes) if req.dtypes else None,
                    "sizes": list(req.sizes) if req.sizes else None, "norms": list(req.norms),
                    "accuracy": req.accuracy, "accuracy_growth": req.accuracy_growth,
                    "samples_per_block": s.samples_per_block, "initial_pairs": s.initial_pairs,
                    "processes": s.processes,
                    "max_samples": s.max_samples,
                    **({"shapes": [c.label() for c in req.shape_cases]} if req.shape_cases else {}),
                    **({"shapes": [spec.label() for spec in req.shape_specs],
                        "layouts": list(req.layouts) if req.layouts else None} if req.shape_specs else {})},
        "baseline": None if req.mode not in ("stored", "referenced") else {
            "path": req.baseline_path, "backend": req.baseline_label, "runs": [run.path for run in req.stored_runs],
            "created": [run.created for run in req.stored_runs]},
        "warnings": list(req.warnings), "notes": list(req.notes),
        "metric": s.metric,
    }
    if s.metric == "instructions":
        from fftgauge.harness.counts.cachegrind import (find_valgrind, host_instruction_set, setarch_prefix,
                                                       valgrind_version)

        path = find_valgrind()
        extra["counting"] = {"tool": "cachegrind", "valgrind": valgrind_version(path) if path else None,
                             "repeats": s.count_repeats, "transforms": s.count_transforms,
                             "cache_sim": s.cache_sim, "no_aslr": bool(setarch_prefix()),
                             "host_instruction_set": host_instruction_set()}
    if req.commit:
        extra["commit"] = req.commit
    return envelope(GATE_SCHEMA, req.seed, extra=extra)


def gate_row(it: GateItem, settings: GateSettings) -> GateRow:
    """Return the :class:`~fftgauge.harness.rows.GateRow` of an item as it stands.

    ``seconds`` is the candidate's median in every mode; the 10th percentile goes to
    ``seconds_p10`` (what a stored-mode ratio compares when ``compared_statistic`` is ``p10``).
    """
    e = it.estimate
    acc = it.accuracy or {}
    ok = it.status == "ok"
    fields: dict[str, Any] = {}
    if e is not None:
        fields.update(ratio=e.ratio, ratio_low=e.ratio_low, ratio_high=e.ratio_high, p_value=e.p_value,
                      seconds=e.seconds, seconds_low=e.seconds_low, seconds_high=e.seconds_high,
                      baseline_seconds=e.baseline_seconds, ratio_raw=e.ratio_raw, yardstick_corrected=e.corrected,
                      method=e.method)
    if it.new_samples:
        fields.update(zip(STATISTICS["p10"], sample_statistic(it.new_samples, "p10", settings.confidence)))
    if it.baseline is not None:
        fields.update(baseline_runs=it.baseline.runs, compared_statistic=it.baseline.statistic)
        if it.old_key is None and it.baseline.statistic == "p10":
            fields["baseline_seconds_p10"] = it.baseline.raw_seconds
    if it.ab_estimate is not None:
        ab = it.ab_estimate
        fields.update(ab_ratio=ab.ratio, ab_ratio_low=ab.ratio_low, ab_ratio_high=ab.ratio_high)
    if it.accuracy is not None:
        fields.update({key: acc.get(key) for key in ("eps_units", "baseline_eps_units", "bound_eps_units")})
        fields["accuracy_detail"] = acc.get("detail")
        for key in ("battery_failures", "new_battery_failures"):
            fields[key] = None if acc.get(key) is None else tuple(acc[key])
    if it.counts:
        from fftgauge.harness.gate.counted import count_fields
        fields.update(count_fields(it))
    fields.setdefault("sampling_seconds", it.pair_seconds * it.pairs_taken)
    verdict = it.verdict if ok else None
    fields.update(row_fields(it.case))  # a shaped case's shape, axes, layout, batch, points
    return GateRow(backend=it.backend, kind=it.case.kind, dtype=it.case.dtype, n=case_size(it.case), verdict=verdict,
                   norm=it.case.norm, status=it.status, message=it.message or acc.get("message") or "",
                   p_holm=it.p_holm, significant=it.significant, conclusive=it.conclusive,
                   inconclusive=None if e is None or not ok else undecided(verdict, e, settings.threshold),
                   timing_verdict=it.timing_verdict, baseline_backend=it.baseline_backend,
                   samples=len(it.new_samples), baseline_samples=len(it.old_samples) if it.old_key else None,
                   plan_seconds=it.plan_seconds, metric=settings.metric, **fields)


def _worker_sampler(req: GateRequest) -> Any:
    from fftgauge.harness.gate.sampling import WorkerSampler

    sides = ({"old": req.old_spec, "new": req.new_spec} if req.mode in ("ab", "referenced")
             else {s: s for s in req.specs})
    return WorkerSampler(sides, req.threads, req.seed, req.settings.samples_per_block, req.timeout_seconds,
                         processes=req.settings.processes)


def _prepare(items: Sequence[GateItem], sampler: Any) -> None:
    for it in items:
        if it.status != "ok":
            continue
        try:
            info = sampler.prepare(it)
            it.plan_seconds = info.get(it.new_key, {}).get("plan_seconds")
        except UnsupportedCase as exc:
            it.status, it.message = "skip", f"the plan refused the case: {exc}"
        except BackendFailure as exc:
            it.fail(f"failed while planning: {exc}")


def _check_accuracy(items: Sequence[GateItem], sampler: Any, req: GateRequest) -> None:
    for it in items:
        if it.status != "ok":
            continue
        try:
            new_rows = sampler.run_checks(it.new_key, it.case, req.seed)
            old_rows = sampler.run_checks(it.old_key, it.case, req.seed) if it.old_key else None
        except BackendFailure as exc:
            it.fail(f"failed during the battery: {exc}")
            continue
        it.accuracy = compare_accuracy(it.case, new_rows, old_rows, it.baseline_accuracy, req.accuracy_growth)


def run_gate(req: GateRequest, doc: dict[str, Any] | None = None, quiet: bool = True,
             sampler_factory: Callable[[GateRequest], Any] | None = None,
             clock: Callable[[], float] = time.monotonic) -> dict[str, Any]:
    """Run the gate and return its ``fftgauge-gate/1`` document (``doc`` filled in place when given).

    ``sampler_factory`` makes the sampler from the request (default: worker processes,
    :class:`fftgauge.harness.gate.sampling.WorkerSampler`); ``clock`` (seconds) measures the
    sampling budget. Tests pass a fake sampler and a fake clock.

    The rows, outcome and yardstick are written into ``doc`` in a ``finally``, so a run
    stopped by a failure or a signal still leaves a document that says how far it got:
    ``complete`` false, the cases whose sampling had finished decided among themselves (Holm
    over those), the others with status ``incomplete`` and no verdict.

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded or a backend is not in the baseline.
    """
    from fftgauge.harness.timing.affinity import pinned
    from fftgauge.harness.execution.dispatch import Progress

    doc = new_doc(req) if doc is None else doc
    if req.settings.metric == "instructions" and sampler_factory is None:
        return _count_gate(req, doc, quiet)
    items: list[GateItem] = []
    finished: list[GateItem] = []
    yardstick: list[float] = []
    sampler = None
    started = time.monotonic()
    try:
        with pinned(req.cpus) as cpus:
            doc["pinned_cpus"] = list(cpus) if cpus else None
            sampler = (sampler_factory or _worker_sampler)(req)
            with sampler:
                items.extend(build_items(req, sampler, doc))
                _prepare(items, sampler)
                progress = Progress(total=sum(it.status == "ok" for it in items), quiet=quiet, desc="gate")
                try:
                    doc["sampling_seconds"] = collect(
                        items, sampler, req.settings, yardstick, clock=clock,
                        on_done=lambda it: (finished.append(it), progress.advance(note=it.case.label()),
                                            sampler.release(it)))
                finally:
                    progress.close()
                finalise(items, req.settings, yardstick_summary(yardstick, req.settings.confidence))
                if req.accuracy:
                    _check_accuracy(items, sampler, req)
        doc["complete"] = True
    finally:
        if not doc["complete"]:
            sampled = [it for it in finished if it.status == "ok" and it.estimate is None]
            if sampled:
                finalise(sampled, req.settings, yardstick_summary(yardstick, req.settings.confidence))
            for it in items:
                if it.status == "ok" and it.estimate is None:
                    it.status, it.message = "incomplete", "the run stopped before this case was decided"
        doc["rows"] = [gate_row(it, req.settings).as_dict() for it in items]
        doc["elapsed_seconds"] = time.monotonic() - started
        _record_yardstick(doc, req, yardstick, getattr(sampler, "yardstick_failure", None))
        doc["outcome"], doc["regressed"] = outcome_of(doc["rows"], doc["complete"])
    return doc


def _count_gate(req: GateRequest, doc: dict[str, Any], quiet: bool) -> dict[str, Any]:
    """Run the gate on instruction counts (:mod:`fftgauge.harness.gate.counted`); fill ``doc`` as :func:`run_gate`."""
    from fftgauge.harness.gate.counted import CountSampler, count_items, record_fingerprint

    items: list[GateItem] = []
    started = time.monotonic()
    try:
        record_fingerprint(doc)
        sampler = CountSampler(req)
        items.extend(build_items(req, sampler, doc))
        count_items(items, sampler, req, quiet=quiet)
        doc["complete"] = True
    finally:
        for it in items:
            if it.status == "ok" and it.counts is None:
                it.status, it.message = "incomplete", "the run stopped before this case was counted"
        doc["rows"] = [gate_row(it, req.settings).as_dict() for it in items]
        doc["elapsed_seconds"] = doc["sampling_seconds"] = time.monotonic() - started
        doc["yardstick"] = None
        doc["outcome"], doc["regressed"] = outcome_of(doc["rows"], doc["complete"])
    return doc


def _record_yardstick(doc: dict[str, Any], req: GateRequest, samples: list[float], failure: str | None) -> None:
    from fftgauge.harness.gate.yardstick import comparable

    record = yardstick_summary(samples, req.settings.confidence)
    if record is not None and req.mode == "stored":
        records = [run.yardstick for run in req.stored_runs if comparable(run.yardstick)]
        if records:
            # the statistic the correction uses (fftgauge.harness.gate.history.baseline_for), so the ratio shown is the one applied
            statistic = common_statistic(records)
            key = STATISTICS[statistic][0]
            record["ratio_statistic"] = statistic
            record["baseline_seconds"] = float(np.median([r[key] for r in records]))
            record["ratio"] = record[key] / record["baseline_seconds"]
        if len(records) < len(req.stored_runs):
            doc["notes"].append("some stored runs have no yardstick record (plain fftgauge time files): cases they "
                                "hold are compared in raw seconds, without the machine-speed correction")
    if failure:
        doc["warnings"].append(f"the yardstick could not be timed ({failure}); no machine-speed correction")
    doc["yardstick"] = record


def run_and_write(req: GateRequest, json_path: str | None = None, markdown: str | None = None,
                  junit: str | None = None, csv: str | None = None, save: str | None = None,
                  quiet: bool = True) -> tuple[dict[str, Any], list[str], int | None]:
    """Run the gate and write its outputs; return the document, the paths written, and the
    number of the signal that stopped the run (None when it ran to its end).

    The outputs (and, for a complete run, the copy saved into ``save``) are written in a
    ``finally``, so a run stopped by a failure or a signal still leaves them. Run it inside
    :func:`fftgauge.harness.shutdown.stop_on_signals` so that SIGTERM and SIGHUP stop it as
    Ctrl-C does: the workers are killed at once, the rows not decided are ``incomplete``, the
    document says ``complete: false`` and ``stopped_by`` the signal.

    Raises
    ------
    UsageError
        When a SPEC cannot be loaded, a backend is not in the baseline, or an output cannot be
        written (after every output was tried).
    """
    import signal

    from fftgauge.harness.gate.outputs import write_outputs
    from fftgauge.harness.shutdown import StopRequested

    doc = new_doc(req)
    written: list[str] = []
    stopped: int | None = None
    try:
        run_gate(req, doc, quiet=quiet)
    except UsageError as exc:
        doc["error"] = str(exc)
        raise
    except KeyboardInterrupt as exc:  # StopRequested (SIGTERM, SIGHUP) is one; plain Ctrl-C too
        stopped = exc.signal_number if isinstance(exc, StopRequested) else int(signal.SIGINT)
        doc["stopped_by"] = signal.Signals(stopped).name
        doc["error"] = f"stopped by {doc['stopped_by']}"
    finally:
        written = write_outputs(doc, markdown=markdown, junit=junit, json_path=json_path, csv=csv)
        if save:
            if doc.get("complete"):
                written.append(save_run(doc, save))
            else:
                print(f"fftgauge: the run did not complete; not saved to {save}", file=sys.stderr)
    return doc, written, stopped

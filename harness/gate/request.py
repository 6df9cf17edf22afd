"""What the gate is asked: its settings, the request, and the one builder that turns a user's
options (from the command line or from Python) into a validated request.

Validation happens here, once (:func:`build_request`); the engine
(:mod:`fftgauge.harness.gate.run`) trusts what it is given.

Modes (:data:`MODES`, chosen from the options by :func:`mode_of`):

- ``ab``: ``old`` and ``new`` SPECs, both measured in this run;
- ``referenced``: ``old``, ``new`` and a folder of saved A/B runs: this run's A/B ratio against
  the stored ones;
- ``stored``: a baseline file or folder and the candidates (``--backend``), only the
  candidates measured;
- ``record``: candidates and a folder to save to, nothing compared.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Sequence

from fftgauge.harness.cases import DTYPES, KINDS
from fftgauge.harness.errors import UsageError
from fftgauge.harness.gate.history import DEFAULT_LAST_RUNS, StoredRun
from fftgauge.harness.shapes.case import SHAPE_KINDS

MODES = ("ab", "referenced", "stored", "record")
#: Sizes of the A/B, referenced and record modes when none are given: a handful, about 10-20 s.
DEFAULT_SIZES = "256,1000,1024,4096,65536"
DEFAULT_THRESHOLD = "5%"
#: What a case's ratio compares: per-call time, or instructions per transform counted under
#: cachegrind (:mod:`fftgauge.harness.gate.counted`).
METRICS = ("time", "instructions")
DEFAULT_METRIC = "time"
#: The threshold of ``--metric instructions`` when none is given: counts wander by about 1e-4.
DEFAULT_COUNT_THRESHOLD = "1%"
#: Repeats of each side's count (each a run of K and one of 2K transforms).
DEFAULT_COUNT_REPEATS = 3
DEFAULT_BUDGET_SECONDS = 30.0
DEFAULT_TIMEOUT_SECONDS = 120.0
#: What an inconclusive run does to the exit code: ``pass`` (0) or ``fail`` (1).
INCONCLUSIVE_POLICIES = ("pass", "fail")
DEFAULT_INCONCLUSIVE = "pass"


@dataclass(frozen=True)
class GateSettings:
    """How the gate samples and decides.

    Attributes
    ----------
    threshold : smallest relative change that can fail the gate (0.05 = 5%).
    alpha : family-wise significance level across the cases (Holm).
    confidence : coverage of each case's interval.
    budget_seconds : sampling time after the first round, over all cases together.
    samples_per_block : samples in one block (each about 1 ms).
    initial_pairs : block pairs every case gets in the first round.
    max_samples : most samples per side per case (bounds the bootstrap's cost).
    resamples : bootstrap resamples of the final estimates.
    quick_resamples : bootstrap resamples while deciding whether to sample more.
    seed : seeds the block order and the bootstrap.
    analysis : A/B estimate, ``paired`` (:func:`fftgauge.harness.gate.estimates.estimate_paired`)
        or ``pooled`` (:func:`fftgauge.harness.gate.estimates.estimate_ab`).
    processes : worker processes per side; blocks are drawn from them in turn
        (:class:`fftgauge.harness.gate.sampling.WorkerSampler` says why).
    inconclusive : exit code of a run whose outcome is ``inconclusive``
        (:func:`fftgauge.harness.gate.decision.exit_code`): ``pass`` (0) or ``fail`` (1).
    metric : what the ratio compares (:data:`METRICS`).
    count_repeats : with ``instructions``, repeats of each side's count.
    count_transforms : with ``instructions``, K (None: by size,
        :func:`fftgauge.harness.counts.cachegrind.default_calls`).
    cache_sim : with ``instructions``, also simulate the caches and report last-level misses.
    """

    threshold: float = 0.05
    alpha: float = 0.05
    confidence: float = 0.95
    budget_seconds: float = DEFAULT_BUDGET_SECONDS
    samples_per_block: int = 5
    initial_pairs: int = 8
    max_samples: int = 1500
    resamples: int = 2000
    quick_resamples: int = 400
    seed: int = 1234
    analysis: str = "paired"
    processes: int = 3
    inconclusive: str = DEFAULT_INCONCLUSIVE
    metric: str = DEFAULT_METRIC
    count_repeats: int = DEFAULT_COUNT_REPEATS
    count_transforms: int | None = None
    cache_sim: bool = False


@dataclass(frozen=True)
class GateRequest:
    """What the gate is asked: validated at the boundary (:func:`build_request`), trusted here."""

    mode: str
    old_spec: str | None = None
    new_spec: str | None = None
    specs: tuple[str, ...] = ()
    kinds: tuple[str, ...] | None = None
    dtypes: tuple[str, ...] | None = None
    sizes: tuple[int, ...] | None = None
    norms: tuple[str, ...] = ("backward",)
    seed: int = 1234
    threads: int = 1
    settings: GateSettings = GateSettings()
    accuracy: bool = False
    accuracy_growth: float = 2.0
    timeout_seconds: float = DEFAULT_TIMEOUT_SECONDS
    stored_runs: tuple[StoredRun, ...] = ()
    baseline_path: str | None = None
    baseline_label: str | None = None
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    commit: str | None = None
    cpus: tuple[int, ...] | None = None
    #: ``--shapes``: shaped cases (:class:`~fftgauge.harness.shapes.case.ShapeCase`) gated instead of sizes.
    shape_cases: tuple = ()
    #: Stored mode's ``--shapes``: the items (:class:`~fftgauge.harness.shapes.grammar.ShapeSpec`)
    #: whose stored shaped cases are re-measured, and ``--layouts`` (None: every stored layout).
    shape_specs: tuple = ()
    layouts: tuple[str, ...] | None = None


def parse_threshold(text: str | float) -> float:
    """Return the threshold ``5%`` or ``0.05`` as a fraction.

    Raises
    ------
    UsageError
        For anything that is not a percentage or a fraction in (0, 1).
    """
    raw = str(text).strip()
    try:
        value = float(raw[:-1]) / 100.0 if raw.endswith("%") else float(raw)
    except ValueError:
        raise UsageError(f"--threshold {text!r}: write a percentage such as 5% or a fraction such as 0.05") from None
    if not raw.endswith("%") and value >= 1.0:
        raise UsageError(f"--threshold {text!r} reads as a fraction of {value:g}; write {value:g}% for a percentage")
    if not 0.0 < value < 1.0:
        raise UsageError(f"--threshold {text!r} must be between 0% and 100% (exclusive)")
    return value


def check_numbers(budget: float, timeout: float, alpha: float, last: int, accuracy_growth: float,
                  threads: int | None, save: str | None, inconclusive: str) -> None:
    """Check the numeric options and the ``save`` folder.

    Raises
    ------
    UsageError
        Naming the first option out of its range.
    """
    if not budget > 0:
        raise UsageError(f"--budget must be positive, got {budget:g}")
    if not timeout > 0:
        raise UsageError(f"--timeout must be positive, got {timeout:g}")
    if not 0.0 < alpha < 1.0:
        raise UsageError(f"--alpha must be between 0 and 1, got {alpha:g}")
    if last < 1:
        raise UsageError(f"--last must be at least 1, got {last}")
    if not accuracy_growth >= 1.0:
        raise UsageError(f"--accuracy-growth must be at least 1, got {accuracy_growth:g}")
    if threads is not None and threads < 1:
        raise UsageError(f"--threads must be a positive integer, got {threads}")
    if save and os.path.exists(save) and not os.path.isdir(save):
        raise UsageError(f"--save {save!r} is a file; give a folder to append runs to")
    if inconclusive not in INCONCLUSIVE_POLICIES:
        raise UsageError(f"--inconclusive {inconclusive!r}: expected pass or fail")


def check_metric(metric: str, mode: str, accuracy: bool, repeats: int, transforms: int | None,
                 cache_sim: bool) -> None:
    """Check the metric and the options that go with it; for ``instructions``, that valgrind is here.

    Raises
    ------
    UsageError
        For an unknown metric, counting options without ``--metric instructions``, an option
        counts do not support (``--accuracy``), or valgrind missing (with the install line).
    """
    if metric not in METRICS:
        raise UsageError(f"--metric {metric!r}: expected one of {', '.join(METRICS)}")
    if metric == "time":
        if cache_sim or transforms is not None or repeats != DEFAULT_COUNT_REPEATS:
            raise UsageError("--count-repeats, --count-transforms and --cache-sim go with --metric instructions")
        return
    if accuracy:
        raise UsageError("--accuracy goes with --metric time (run the battery in a gate of its own)")
    if repeats < 2:
        raise UsageError(f"--count-repeats must be at least 2 (the count's own spread is measured), got {repeats}")
    if transforms is not None and transforms < 1:
        raise UsageError(f"--count-transforms must be a positive integer, got {transforms}")
    from fftgauge.harness.counts.cachegrind import require_valgrind
    require_valgrind()


def stored_shape_filter(shapes: str | None, layouts: str | None, sizes: str | None,
                        accuracy: bool) -> tuple[tuple, tuple[str, ...] | None]:
    """Return stored mode's ``--shapes`` items and ``--layouts`` (``((), None)`` without ``--shapes``).

    In stored mode ``--shapes`` selects stored shaped cases to re-measure, as ``--sizes``
    selects stored 1-D ones: the items of the grammar
    (:func:`~fftgauge.harness.shapes.grammar.parse_shapes`, named sets included) by shape and
    axes, ``--layouts`` (when given) by layout, ``--kinds``/``--dtypes`` as for 1-D cases.

    Raises
    ------
    UsageError
        For a malformed item or layout, ``--layouts`` without ``--shapes``, ``--shapes`` with
        ``--sizes`` or with ``--accuracy``.
    """
    from fftgauge.harness.cli import parse_choice_list
    from fftgauge.harness.shapes.case import LAYOUTS
    from fftgauge.harness.shapes.grammar import parse_shapes

    if shapes is None:
        if layouts:
            raise UsageError("--layouts goes with --shapes (a 1-D size has one layout)")
        return (), None
    if sizes:
        raise UsageError("--shapes and --sizes both given: --shapes names whole arrays (a 1-D size is a "
                         "one-length shape such as 1024); give one of them")
    if accuracy:
        raise UsageError("--shapes goes without --accuracy; check shaped accuracy with fftgauge check --shapes")
    return tuple(parse_shapes(shapes)), parse_choice_list(layouts, LAYOUTS, "layout")


def mode_of(old: str | None, new: str | None, backends: Sequence[str], baseline: str | None,
            baseline_backend: str | None, save: str | None) -> str:
    """Return the mode (:data:`MODES`) the options ask for, after parsing every SPEC.

    Raises
    ------
    UsageError
        For an impossible combination, a malformed SPEC, or nothing to compare.
    """
    from fftgauge.backends.registry import parse_spec

    if bool(old) != bool(new):
        raise UsageError("A/B mode needs both --old SPEC and --new SPEC")
    if baseline_backend and not baseline:
        raise UsageError("--baseline-backend goes with --baseline")
    if old:
        if backends:
            raise UsageError("--backend is for --baseline mode; in A/B mode name the two sides with --old and --new")
        parse_spec(old)
        parse_spec(new)
        return "referenced" if baseline else "ab"
    for spec in backends:
        parse_spec(spec)
    if baseline:
        if baseline_backend and len(backends) != 1:
            raise UsageError("--baseline-backend needs exactly one --backend SPEC (the candidate)")
        return "stored"
    if backends and save:
        return "record"
    raise UsageError("nothing to compare: give --old SPEC --new SPEC, or --baseline FILE|DIR "
                     "(or --backend SPEC --save DIR to record a first baseline)")


def build_request(*, old: str | None = None, new: str | None = None, backends: Sequence[str] = (),
                  baseline: str | None = None, baseline_backend: str | None = None,
                  last: int = DEFAULT_LAST_RUNS, kinds: str | None = None, dtypes: str | None = None,
                  sizes: str | None = None, seed: int = 1234, threads: int | None = None,
                  pin_cpu: str | None = None, threshold: str | float | None = None, alpha: float = 0.05,
                  budget: float = DEFAULT_BUDGET_SECONDS, accuracy: bool = False, accuracy_growth: float = 2.0,
                  allow_other_machine: bool = False, timeout: float = DEFAULT_TIMEOUT_SECONDS,
                  inconclusive: str = DEFAULT_INCONCLUSIVE, save: str | None = None,
                  commit: str | None = None, metric: str = DEFAULT_METRIC,
                  count_repeats: int = DEFAULT_COUNT_REPEATS, count_transforms: int | None = None,
                  cache_sim: bool = False, shapes: str | None = None, layouts: str | None = None) -> GateRequest:
    """Return the validated :class:`GateRequest` the options describe, stored runs loaded.

    The keywords are the command line's options (``kinds``, ``dtypes`` and ``sizes`` in their
    text form, ``threshold`` as ``5%`` or ``0.05``, by default :data:`DEFAULT_THRESHOLD` for time and
    :data:`DEFAULT_COUNT_THRESHOLD` for instructions); ``save`` is only checked here. ``shapes``
    and ``layouts`` name shaped cases instead of sizes: the cases measured in the A/B,
    referenced and record modes (:func:`fftgauge.harness.shapes.options.shaped_gate_cases`), the
    stored shaped cases re-measured in stored mode (:func:`stored_shape_filter`).

    Raises
    ------
    UsageError
        For a malformed option, an impossible combination, or a missing, corrupt, foreign or
        other-machine baseline (the message names it).
    """
    from fftgauge.harness.cli import parse_choice_list
    from fftgauge.harness.gate.history import load_stored_runs, default_specs_of, stored_threads
    from fftgauge.harness.sizes import parse_sizes
    from fftgauge.harness.timing.affinity import choose_cpus, parse_pin

    backends = tuple(backends or ())
    check_numbers(budget, timeout, alpha, last, accuracy_growth, threads, save, inconclusive)
    mode = mode_of(old, new, backends, baseline, baseline_backend, save)
    check_metric(metric, mode, accuracy, count_repeats, count_transforms, cache_sim)
    if threshold is None:
        threshold = DEFAULT_COUNT_THRESHOLD if metric == "instructions" else DEFAULT_THRESHOLD
    fraction = parse_threshold(threshold)
    from fftgauge.harness.shapes.options import shaped_gate_cases
    shape_specs, layout_list = stored_shape_filter(shapes, layouts, sizes, accuracy) if mode == "stored" else ((), None)
    shaped = [] if mode == "stored" else shaped_gate_cases(shapes, layouts, kinds, dtypes, sizes, mode, metric,
                                                              accuracy, save)
    # stored mode: any kind a stored row may hold (1-D names, and the n names of shaped rows)
    kind_list = parse_choice_list(kinds, SHAPE_KINDS if shaped or mode == "stored" else KINDS, "kind")
    dtype_list = parse_choice_list(dtypes, DTYPES, "dtype")
    size_list = tuple(parse_sizes(sizes)) if sizes else None
    runs: tuple[StoredRun, ...] = ()
    warnings: list[str] = []
    notes: list[str] = []
    specs = backends
    if mode in ("stored", "referenced") and metric == "instructions":  # by the count fingerprint
        from fftgauge.harness.counts.cachegrind import require_valgrind
        from fftgauge.harness.counts.fingerprint import count_fingerprint
        from fftgauge.harness.gate.counted_baseline import load_count_runs
        runs, warnings, notes = load_count_runs(baseline, last, allow_other_machine,
                                                count_fingerprint(require_valgrind()))
    elif mode in ("stored", "referenced"):
        runs, warnings, notes = load_stored_runs(baseline, last, allow_other_machine)
    if mode == "stored":
        specs = specs or default_specs_of(runs)
        threads = threads if threads is not None else stored_threads(runs)
    else:
        if mode == "referenced" and not any(r.get("ab_ratio") or (r.get("ratio") and r.get("baseline_runs") is None)
                                            for run in runs for r in run.rows):
            raise UsageError(f"the baseline {baseline!r} holds no A/B ratios; with --old/--new, --baseline "
                             f"takes a folder of saved A/B gate runs (seed it with fftgauge gate --old REF "
                             f"--new SPEC --save DIR)")
        size_list = size_list or tuple(parse_sizes(DEFAULT_SIZES))
        dtype_list = dtype_list or ("float64",)
    cpus = choose_cpus(parse_pin(pin_cpu), threads or 1)
    settings = GateSettings(threshold=fraction, alpha=alpha, budget_seconds=budget, seed=seed,
                            inconclusive=inconclusive, metric=metric, count_repeats=count_repeats,
                            count_transforms=count_transforms, cache_sim=cache_sim)
    return GateRequest(mode=mode, old_spec=old, new_spec=new, specs=specs, kinds=kind_list, dtypes=dtype_list,
                       sizes=size_list, seed=seed, threads=threads or 1, settings=settings, accuracy=accuracy,
                       accuracy_growth=accuracy_growth, timeout_seconds=timeout, stored_runs=runs,
                       baseline_path=baseline, baseline_label=baseline_backend, warnings=tuple(warnings),
                       notes=tuple(notes), commit=commit, cpus=cpus, shape_cases=tuple(shaped),
                       shape_specs=tuple(shape_specs), layouts=layout_list)

"""The rows results files store: one small frozen dataclass per schema.

Field names are the contracts' (``fftgauge-check/1``, ``fftgauge-time/1``); fields beyond the
contract (``norm``, ``reference``) are additions in the same spirit. Rows are turned into
dicts with :func:`dataclasses.asdict` for JSON and into pandas DataFrames at the edges.
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass
from typing import Any, Iterable

STATUSES = ("pass", "fail", "error", "skip")

DIAGNOSES = (
    "sign", "scale", "bit-reversed", "shifted", "precision", "truncated-size", "input-modified",
    "nondeterministic", "dtype", "shape", "nonfinite", "real-only", "thread-unsafe", "overflow", "user-limit",
    "localised", "time-shifted", "output-aliased", "scaling-shift", "rounding", "twiddle-bits", "unknown",
    # shaped cases (fftgauge.harness.shapes.diagnosis)
    "wrong-axis", "transposed", "batch-leak", "layout", "hermitian-half",
)


@dataclass(frozen=True)
class CheckRow:
    """One verdict of the battery: one check of one case on one backend.

    ``status`` is one of :data:`STATUSES`; ``diagnosis`` is ``None`` on pass and skip,
    otherwise one code of :data:`DIAGNOSES` (``error`` rows carry ``None`` too: the message
    says what went wrong). ``value``/``limit`` are in the check's own unit (relative error
    for accuracy-like checks); ``eps_units`` is ``value`` over the machine epsilon of
    ``dtype`` where that makes sense. ``reference`` names the ground-truth method used.
    """

    backend: str
    kind: str
    dtype: str
    n: int
    check: str
    status: str
    value: float | None = None
    limit: float | None = None
    eps_units: float | None = None
    diagnosis: str | None = None
    message: str = ""
    norm: str = "backward"
    reference: str | None = None
    #: Where ``limit`` came from: ``bound`` (the check's built-in bound) or ``user`` (a
    #: ``--limit``/``--limits`` criterion, :mod:`fftgauge.harness.battery.criteria`); None without a limit.
    limit_source: str | None = None
    #: With a user limit: the built-in bound it replaced, and the bound's diagnosis of a row it fails.
    bound_limit: float | None = None
    bound_diagnosis: str | None = None
    #: Shaped cases (:mod:`fftgauge.harness.shapes.fields`): shape, axes, layout, transforms per
    #: call, N (= ``n``). Optional: a 1-D row's dict leaves them out.
    shape: list[int] | None = None
    axes: list[int] | None = None
    layout: str | None = None
    batch: int | None = None
    points: int | None = None
    #: The ``sqnr`` row of a q15/q31 case (:mod:`fftgauge.harness.fixed.checks`): the backend's
    #: SQNR (dB) on noise at each level, keyed by the level in dBFS (``"0"``, ``"-6"``, ...);
    #: what ``fftgauge pick --sqnr`` holds a backend to. Optional: other rows leave it out.
    noise_sqnr_db: dict[str, float] | None = None

    def as_dict(self) -> dict[str, Any]:
        """Return the row as a JSON-able dict (contract field order first; the shaped fields
        only in rows of shaped cases, ``noise_sqnr_db`` only in ``sqnr`` rows that measured it)."""
        out = asdict(self)
        if self.shape is None:
            for name in ("shape", "axes", "layout", "batch", "points"):
                out.pop(name)
        if self.noise_sqnr_db is None:
            out.pop("noise_sqnr_db")
        return out


def message_cause(message: Any) -> str:
    """Return a row's message with its numbers blanked (``#``): one cause seen at many sizes
    (``size must be a power of two, got 12``) is one key."""
    return re.sub(r"\d+(\.\d+)?(e[-+]?\d+)?", "#", str(message or "")).strip()


def skip_rows(backend: str, case: Any, checks: Iterable[str], reason: str) -> list[CheckRow]:
    """Return one ``skip`` row per check name for ``case`` (a :class:`~fftgauge.harness.cases.Case`):
    the case, or that check of it, is outside what the backend claims or the check can say;
    ``reason`` (the message) says why. The one constructor of check-level skip rows."""
    return [CheckRow(backend=backend, kind=case.kind, dtype=case.dtype, n=case.n, check=name, status="skip",
                     message=reason, norm=case.norm) for name in checks]


def error_rows(backend: str, case: Any, checks: Iterable[str], message: str) -> list[CheckRow]:
    """Return one ``error`` row per check name for ``case``: the backend raised, crashed, hung
    or could not be planned; ``message`` says what happened. The one constructor of error rows
    that stand for a whole case (or a check that could not run)."""
    return [CheckRow(backend=backend, kind=case.kind, dtype=case.dtype, n=case.n, check=name, status="error",
                     message=message, norm=case.norm) for name in checks]


@dataclass(frozen=True)
class TimeRow:
    """One timed case: median execution time of one transform with its 95% interval.

    ``flops`` is the conventional 5 N log2 N (complex) or 2.5 N log2 N (real) count used
    for ``gflops`` whatever the algorithm; ``peak_bytes`` the peak extra memory of one
    execution beyond input and output (None when not measured). Beyond the contract:
    ``overhead_seconds`` (the timing loop's own cost per call, already subtracted),
    ``floor_seconds`` (what a do-nothing Python-level backend reads: the smallest meaningful time),
    ``relative_spread`` (IQR / median of the samples), ``coverage`` (exact confidence of the
    order-statistic interval), ``cold_cache``, ``memory_method``, ``timing_source``
    (``harness``: wall clock around the calls; ``program``: the durations an external
    implementation reported itself), ``seconds_p10``/``seconds_p10_low``/``seconds_p10_high``
    (the 10th percentile of the per-call times and its interval: the time with the machine's
    other load mostly filtered out; the gate's stored mode compares it). A device backend's
    plan (:meth:`fftgauge.backends.base.Plan.time_row_fields`) adds the copies it timed apart:
    ``host_to_device_seconds``/``device_to_host_seconds`` (one copy of the case's input to the
    device, of its output back; not in ``seconds``) and ``host_to_device_bytes``/
    ``device_to_host_bytes`` (what each moves); None for every other backend.
    """

    backend: str
    kind: str
    dtype: str
    n: int
    threads: int
    plan_seconds: float
    seconds: float
    seconds_low: float
    seconds_high: float
    samples: int
    loops: int
    flops: float
    gflops: float
    ns_per_nlogn: float | None
    peak_bytes: int | None
    in_place: bool
    norm: str = "backward"
    status: str = "ok"
    message: str = ""
    overhead_seconds: float | None = None
    floor_seconds: float | None = None
    relative_spread: float | None = None
    coverage: float | None = None
    cold_cache: bool = False
    memory_method: str | None = None
    timing_source: str = "harness"
    seconds_p10: float | None = None
    seconds_p10_low: float | None = None
    seconds_p10_high: float | None = None
    #: Shaped cases (:mod:`fftgauge.harness.shapes.fields`): the array's shape, the axes
    #: transformed, the input's layout, transforms per call, N (= ``n``); None for 1-D cases.
    shape: list[int] | None = None
    axes: list[int] | None = None
    layout: str | None = None
    batch: int | None = None
    points: int | None = None
    #: Host-device copies a device backend's plan timed apart (seconds, bytes); None elsewhere.
    host_to_device_seconds: float | None = None
    device_to_host_seconds: float | None = None
    host_to_device_bytes: int | None = None
    device_to_host_bytes: int | None = None

    def as_dict(self) -> dict[str, Any]:
        """Return the row as a JSON-able dict."""
        return asdict(self)


@dataclass(frozen=True)
class GateRow:
    """One case of a gate run (``fftgauge-gate/1``): candidate time / baseline time and the verdict.

    Contract fields first: ``ratio`` with its 95% interval ``ratio_low``/``ratio_high``,
    ``p_value`` (before Holm) and ``verdict`` (``slower``, ``faster``, ``same``, ``accuracy``;
    None when the case was not compared: record mode, skip, error, incomplete). Beyond the
    contract: ``status`` (``ok``, ``skip``, ``error``, ``incomplete``), ``p_holm`` (Holm-adjusted),
    ``significant``, ``conclusive`` (the interval straddles neither threshold: the sampling
    loop's stopping rule), ``inconclusive`` (the verdict is ``same`` and the interval still
    reaches above 1 + threshold: a slowdown the run could not rule out), ``timing_verdict``;
    ``seconds``/``seconds_low``/``seconds_high`` the candidate's **median** per-call time and its
    interval, ``seconds_p10``/``seconds_p10_low``/``seconds_p10_high`` its 10th percentile,
    ``compared_statistic`` what a stored-mode ratio compares (``p10`` or ``median``),
    ``baseline_seconds`` the baseline's median (``baseline_seconds_p10`` its 10th percentile in
    stored mode), ``ratio_raw`` the ratio before the yardstick correction (stored mode, in the
    compared statistic) or of the two sides' medians (A/B), ``ab_ratio`` fields this run's
    new/old ratio (two-sided modes, what a later referenced run compares with); accuracy
    fields with ``--accuracy`` (None otherwise): ``message`` then says in one line which checks
    newly fail (with their diagnosis codes) or how far the error grew, ``accuracy_detail``
    holds the failing checks' own messages. ``metric`` says what decided (``time``, or
    ``instructions``: then ``ratio`` compares instructions per transform, given in
    ``instructions``/``baseline_instructions`` with their repeats' relative spread, the seconds
    fields are None, and ``ll_misses`` fields hold simulated last-level misses per transform
    with ``--cache-sim``).
    """

    backend: str
    kind: str
    dtype: str
    n: int
    ratio: float | None = None
    ratio_low: float | None = None
    ratio_high: float | None = None
    p_value: float | None = None
    verdict: str | None = None
    norm: str = "backward"
    status: str = "ok"
    message: str = ""
    p_holm: float | None = None
    significant: bool | None = None
    conclusive: bool | None = None
    inconclusive: bool | None = None
    timing_verdict: str | None = None
    seconds: float | None = None
    seconds_low: float | None = None
    seconds_high: float | None = None
    seconds_p10: float | None = None
    seconds_p10_low: float | None = None
    seconds_p10_high: float | None = None
    compared_statistic: str | None = None
    baseline_backend: str | None = None
    baseline_seconds: float | None = None
    baseline_seconds_p10: float | None = None
    ratio_raw: float | None = None
    yardstick_corrected: bool | None = None
    samples: int = 0
    baseline_samples: int | None = None
    baseline_runs: int | None = None
    method: str | None = None
    ab_ratio: float | None = None
    ab_ratio_low: float | None = None
    ab_ratio_high: float | None = None
    sampling_seconds: float = 0.0
    plan_seconds: float | None = None
    eps_units: float | None = None
    baseline_eps_units: float | None = None
    bound_eps_units: float | None = None
    battery_failures: tuple[str, ...] | None = None
    new_battery_failures: tuple[str, ...] | None = None
    accuracy_detail: str | None = None
    metric: str = "time"
    instructions: float | None = None
    instructions_spread: float | None = None
    baseline_instructions: float | None = None
    baseline_instructions_spread: float | None = None
    ll_misses: float | None = None
    baseline_ll_misses: float | None = None
    count_transforms: int | None = None
    count_repeats: int | None = None
    #: Instructions per transform of each repeat (what a stored-mode count baseline pools).
    instructions_repeats: list[float] | None = None
    baseline_instructions_repeats: list[float] | None = None
    #: Shaped cases: as in :class:`TimeRow` (None for 1-D cases).
    shape: list[int] | None = None
    axes: list[int] | None = None
    layout: str | None = None
    batch: int | None = None
    points: int | None = None

    def as_dict(self) -> dict[str, Any]:
        """Return the row as a JSON-able dict (contract fields first)."""
        return asdict(self)

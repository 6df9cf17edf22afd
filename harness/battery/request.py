"""What a battery run is asked to do, and the one function that builds it.

``fftgauge check`` (from its parsed options) and the Python API :func:`fftgauge.check` (from
its keyword arguments) both call :func:`build_request`, so the two paths validate the same
way and apply the same defaults (sizes, precisions, the limits of the pure-Python
references); nothing downstream re-checks a :class:`BatteryRequest`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

from fftgauge.harness.battery.budget import DEFAULT_CASE_BUDGET_SECONDS, REFERENCE_CASE_BUDGET_SECONDS
from fftgauge.harness.cases import DTYPES, KINDS, NORMS, parse_choice_list
from fftgauge.harness.errors import UsageError

#: Seconds one case (all its checks) may take in a worker before it is killed.
DEFAULT_CASE_TIMEOUT_SECONDS = 120.0

#: The size list of a run that does not name one.
DEFAULT_SIZES = "@default"

#: The precisions of a run that does not name them.
DEFAULT_DTYPES = ("float32", "float64")

#: The normalisations of a run that does not name them.
DEFAULT_NORMS = ("backward",)

@dataclass(frozen=True)
class BatteryRequest:
    """What to run: validated at the boundary (:func:`build_request`), trusted here."""

    specs: tuple[str, ...]
    kinds: tuple[str, ...] | None
    dtypes: tuple[str, ...]
    sizes: tuple[int, ...]
    norms: tuple[str, ...] = DEFAULT_NORMS
    checks: tuple[str, ...] | None = None
    seed: int = 1234
    threads: int | None = None
    timeout_seconds: float = DEFAULT_CASE_TIMEOUT_SECONDS
    max_n_pure_python: int | None = None
    #: Seconds one case may take by its estimate (budget.py); None: no budget.
    case_budget_seconds: float | None = DEFAULT_CASE_BUDGET_SECONDS
    #: The (smaller) budget of the pure-Python references; None: the case budget.
    reference_budget_seconds: float | None = None
    #: The user's pass criteria (:func:`fftgauge.harness.battery.criteria.build_limits`); empty: the built-in bounds.
    limits: tuple = ()
    #: ``--shapes``: the parsed items (:class:`fftgauge.harness.shapes.grammar.ShapeSpec`) and the
    #: shaped cases they give with the kinds, precisions, ``layouts`` and norms (empty: none).
    shapes: tuple = ()
    layouts: tuple[str, ...] = ("C",)
    shape_cases: tuple = ()


def choice_list(value: str | Sequence[str] | None, allowed: Sequence[str], what: str) -> tuple[str, ...] | None:
    """Return ``value`` (a comma string, a sequence of names, or None) as a checked tuple.

    None stays None (the caller's default applies); ``all`` means every allowed item.

    Raises
    ------
    UsageError
        Naming the first item that is not allowed, or an empty item.
    """
    if value is None or isinstance(value, str):
        return parse_choice_list(value, allowed, what)
    return parse_choice_list(",".join(str(v) for v in value), allowed, what)


def build_request(backends: Sequence[str] | None = None, sizes: str | None = None,
                  kinds: str | Sequence[str] | None = None, dtypes: str | Sequence[str] | None = None,
                  norms: str | Sequence[str] | None = None, checks: str | Sequence[str] | None = None,
                  seed: int = 1234, threads: int | None = None,
                  timeout_seconds: float = DEFAULT_CASE_TIMEOUT_SECONDS,
                  pure_python_max_n: int | None = None, limits=None,
                  limits_file: str | None = None,
                  case_budget_seconds: float | None = DEFAULT_CASE_BUDGET_SECONDS,
                  shapes: str | None = None, layouts: str | Sequence[str] | None = None) -> BatteryRequest:
    """Return the validated :class:`BatteryRequest` for these arguments.

    Parameters
    ----------
    backends : SPEC strings (default: every available built-in backend).
    sizes : the ``--sizes`` grammar (default :data:`DEFAULT_SIZES`).
    kinds, dtypes, norms, checks : comma strings or sequences of names (defaults: every kind
        the backend supports, :data:`DEFAULT_DTYPES`, :data:`DEFAULT_NORMS`, every check).
    seed : seed of every random input.
    threads : threads for backends that take a thread option, and the BLAS cap per worker.
    timeout_seconds : seconds one case may take before its worker is killed.
    pure_python_max_n : largest size given to the pure-Python references (None or 0: no size
        limit; when neither it nor ``sizes`` is given, the references get the budget
        :data:`~fftgauge.harness.battery.budget.REFERENCE_CASE_BUDGET_SECONDS` instead).
    case_budget_seconds : seconds one case may take by its estimate; cases over it are
        skipped for time (0 or None: no budget).
    limits, limits_file : the user's pass criteria: ``--limit`` strings or a mapping
        ``{check: "AMOUNT UNIT"}``, and a TOML file of them
        (:func:`fftgauge.harness.battery.criteria.build_limits`).
    shapes, layouts : the ``--shapes`` grammar (:mod:`fftgauge.harness.shapes.grammar`) and the
        input layouts of its cases (default C); with shapes and no ``sizes`` only the shaped
        cases run, with both both do (:func:`fftgauge.harness.shapes.request.shaped_fields`).

    Raises
    ------
    UsageError
        For a malformed size list, an unknown kind/dtype/norm/check, a non-positive timeout or
        thread count, a negative size limit, or a bad pass criterion (the message names the value).
    """
    from fftgauge.backends.registry import default_specs
    from fftgauge.harness.battery.checks import CHECKS
    from fftgauge.harness.battery.criteria import build_limits
    from fftgauge.harness.sizes import parse_sizes

    if not timeout_seconds > 0:
        raise UsageError(f"the case timeout must be positive seconds, got {timeout_seconds:g}")
    if threads is not None and threads < 1:
        raise UsageError(f"threads must be a positive integer, got {threads}")
    if pure_python_max_n is not None and pure_python_max_n < 0:
        raise UsageError(f"the pure-Python size limit must be 0 (none) or a positive size, got {pure_python_max_n}")
    if case_budget_seconds is not None and case_budget_seconds < 0:
        raise UsageError(f"the case budget must be 0 (none) or positive seconds, got {case_budget_seconds:g}")
    budget = case_budget_seconds or None
    reference_budget = None
    if sizes is None and pure_python_max_n is None:
        reference_budget = min(REFERENCE_CASE_BUDGET_SECONDS, budget or REFERENCE_CASE_BUDGET_SECONDS)
    from fftgauge.harness.shapes.request import shaped_fields

    shaped = shaped_fields(shapes, layouts, kinds, dtypes or DEFAULT_DTYPES, norms or DEFAULT_NORMS, checks)
    if shaped:
        line_sizes = tuple(parse_sizes(sizes)) if sizes is not None else ()
        return BatteryRequest(
            specs=tuple(backends) if backends else tuple(default_specs()), kinds=shaped["kinds"],
            dtypes=choice_list(dtypes, DTYPES, "dtype") or DEFAULT_DTYPES, sizes=line_sizes,
            norms=choice_list(norms, NORMS, "norm") or DEFAULT_NORMS, checks=shaped["checks"], seed=int(seed),
            threads=threads, timeout_seconds=float(timeout_seconds), max_n_pure_python=pure_python_max_n or None,
            case_budget_seconds=budget, reference_budget_seconds=reference_budget,
            limits=build_limits(limits, limits_file), shapes=shaped["shapes"], layouts=shaped["layouts"],
            shape_cases=shaped["shape_cases"])
    return BatteryRequest(
        specs=tuple(backends) if backends else tuple(default_specs()),
        kinds=choice_list(kinds, KINDS, "kind"),
        dtypes=choice_list(dtypes, DTYPES, "dtype") or DEFAULT_DTYPES,
        sizes=tuple(parse_sizes(sizes if sizes is not None else DEFAULT_SIZES)),
        norms=choice_list(norms, NORMS, "norm") or DEFAULT_NORMS,
        checks=choice_list(checks, tuple(CHECKS), "check"),
        seed=int(seed),
        threads=threads,
        timeout_seconds=float(timeout_seconds),
        max_n_pure_python=pure_python_max_n or None,
        case_budget_seconds=budget,
        reference_budget_seconds=reference_budget,
        limits=build_limits(limits, limits_file),
    )

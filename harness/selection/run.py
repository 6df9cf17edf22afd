"""Running ``fftgauge pick``: the battery and the timer on the workload, then the ranking.

:func:`run_pick` reuses the engines as they are: the battery
(:func:`fftgauge.harness.battery.run.run_battery`, built with
:func:`fftgauge.harness.battery.request.build_request`) on every candidate, then the timing
runner (:func:`fftgauge.harness.timing.runner.run_timing`) on those the battery found
claiming and passing the workload (timing a backend that cannot be recommended would
spend the budget on nothing). Both documents are kept in the result (``evidence``).

The backends a pick weighs when none is named (:func:`candidate_specs`) are the built-ins
that load here, less the engine's synthetic backends, the calibration backend ``slowed``,
the generic adapters (``array-api`` and ``scipy-backend``, whose defaults are numpy and
scipy again) and the pure-Python references (far too slow to be a choice).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

from fftgauge.harness.results import envelope
from fftgauge.harness.selection.ranking import Candidate, assess, battery_reasons, rank
from fftgauge.harness.selection.verdict import summary_sentences
from fftgauge.harness.selection.workload import Workload

PICK_SCHEMA = "fftgauge-pick/1"
#: Built-ins never weighed by default (see the module docstring).
NOT_CANDIDATES = ("slowed", "array-api", "scipy-backend")


@dataclass(frozen=True)
class PickSettings:
    """How hard to look: the timer's samples, rounds and per-case budget, the battery's case
    timeout and budget, the seed, and the CPUs the timing is pinned to."""

    seed: int = 1234
    samples: int = 50
    rounds: int = 5
    budget_seconds: float = 0.5
    timeout_seconds: float = 120.0
    case_budget_seconds: float | None = 10.0
    cpus: tuple[int, ...] | None = None


def candidate_specs() -> list[str]:
    """Return the built-in backends a pick weighs by default: those that load, less
    :data:`NOT_CANDIDATES`, the synthetic ones and the pure-Python references."""
    from fftgauge.backends.registry import BUILTINS, SYNTHETIC_BACKENDS, load_backend
    from fftgauge.harness.errors import UsageError

    out = []
    for name in BUILTINS:
        if name in NOT_CANDIDATES or name in SYNTHETIC_BACKENDS:
            continue
        try:
            backend = load_backend(name)
            if backend.capabilities().pure_python:
                continue
        except UsageError:
            continue
        except Exception:  # noqa: BLE001 - a library that is installed but broken is no candidate
            continue
        out.append(name)
    return out


def battery_doc(workload: Workload, specs: Sequence[str], settings: PickSettings, quiet: bool) -> dict[str, Any]:
    """Return the battery's ``fftgauge-check/1`` document for the workload.

    Raises
    ------
    UsageError
        When a SPEC does not load (the battery's own message).
    """
    from fftgauge.harness.battery.request import build_request
    from fftgauge.harness.battery.run import run_battery

    req = build_request(backends=list(specs), sizes=",".join(map(str, workload.sizes)), kinds=list(workload.kinds),
                        dtypes=list(workload.dtypes), norms=[workload.norm], seed=settings.seed,
                        threads=workload.threads, timeout_seconds=settings.timeout_seconds,
                        case_budget_seconds=settings.case_budget_seconds)
    return run_battery(req, json_path=None, quiet=quiet)


def timing_doc(workload: Workload, specs: Sequence[str], settings: PickSettings, quiet: bool) -> dict[str, Any]:
    """Return the timing runner's ``fftgauge-time/1`` document for the workload (no rows when ``specs`` is empty)."""
    from fftgauge.harness.timing.runner import TimingRequest, run_timing

    if not specs:
        return {"rows": []}
    req = TimingRequest(specs=tuple(specs), kinds=workload.kinds, dtypes=workload.dtypes, sizes=workload.sizes,
                        norms=(workload.norm,), seed=settings.seed, threads=workload.threads,
                        samples=settings.samples, budget_seconds=settings.budget_seconds,
                        timeout_seconds=settings.timeout_seconds, rounds=settings.rounds, cpus=settings.cpus)
    return run_timing(req, None, quiet=quiet)


def labels_of(check: dict[str, Any], specs: Sequence[str]) -> dict[str, str]:
    """Return SPEC -> label from a battery document's ``backends`` map (each entry records its SPEC)."""
    by_spec = {entry.get("spec"): label for label, entry in (check.get("backends") or {}).items()}
    return {spec: by_spec.get(spec, spec) for spec in specs}


def rank_from_docs(workload: Workload, specs: Sequence[str], check: dict[str, Any],
                   timing: dict[str, Any]) -> list[Candidate]:
    """Return the ranked candidates from a battery and a timing document."""
    labels = labels_of(check, specs)
    return rank(assess(labels[s], rows_of(check, labels[s]), rows_of(timing, labels[s]), workload) for s in specs)


def rows_of(doc: dict[str, Any], label: str) -> list[dict]:
    """Return the rows of ``doc`` that belong to the backend labelled ``label``."""
    return [r for r in doc["rows"] if r["backend"] == label]


def run_pick(workload: Workload, specs: Sequence[str] | None = None, settings: PickSettings = PickSettings(),
             quiet: bool = True) -> dict[str, Any]:
    """Run the battery and the timer on the workload and return the ``fftgauge-pick/1`` document.

    Raises
    ------
    UsageError
        When no backend is available, or a SPEC does not load.
    """
    from fftgauge.harness.errors import UsageError

    specs = list(specs) if specs else candidate_specs()
    if not specs:
        raise UsageError("no backend is available to pick from; install one (pip install scipy) or name one with --backend")
    check = battery_doc(workload, specs, settings, quiet)
    labels = labels_of(check, specs)
    passing = [s for s in specs if not battery_reasons(rows_of(check, labels[s]), workload)]
    timing = timing_doc(workload, passing, settings, quiet)
    return pick_document(workload, specs, settings, check, timing)


def pick_document(workload: Workload, specs: Sequence[str], settings: PickSettings, check: dict[str, Any],
                  timing: dict[str, Any]) -> dict[str, Any]:
    """Return the ``fftgauge-pick/1`` document of a battery and a timing document of ``specs``
    on the workload: the envelope, the workload, the settings, the recommended backend (or
    None), the answer in words (``summary``), the ranked rows and both documents (``evidence``)."""
    ranked = rank_from_docs(workload, specs, check, timing)
    doc = envelope(PICK_SCHEMA, settings.seed, extra={
        "workload": workload.as_dict(),
        "settings": {"samples": settings.samples, "rounds": settings.rounds, "budget_seconds": settings.budget_seconds},
        "recommended": next((c.backend for c in ranked if c.recommended), None),
        "summary": summary_sentences(workload, ranked),
        "evidence": {"check": check, "time": timing},
    })
    doc["rows"] = [c.as_dict() for c in ranked]
    return doc


"""The user's own pass criteria: limits per check (or for every value check) that replace the
built-in bound, parsed once at the boundary and applied to the battery's rows.

A criterion is ``[CHECK=]AMOUNT UNIT`` (``--limit``, repeatable) or an entry of a TOML file's
``[limits]`` table (``--limits FILE``)::

    accuracy=8eps          8 machine epsilons of the case's precision
    accuracy=1e-3 rel      a relative error (``rel`` or ``relative``)
    accuracy=-90dB         an error floor: 20 log10 of the relative error (``dB``)
    accuracy=1e-6abs@0.5   an absolute rms output error for an input of rms amplitude 0.5
    all=16eps              every value check (:data:`LIMITED_CHECKS`); CHECK= may be left out

Every unit becomes a limit on the row's ``value``, the check's own relative error (for
``accuracy`` the relative rms error): ``k eps`` is ``k * eps(dtype)``
(:func:`fftgauge.harness.dft.machine_epsilon`), ``x dB`` is ``10^(x/20)``, and ``a abs@S`` is
``a / (S * |c| * sqrt(N))``, with ``c`` the case's normalisation factor
(:func:`fftgauge.harness.dft.norm_factor`), or the scale the backend declares for the
transform (``forward_scale``/``inverse_scale`` in its conventions): by Parseval's theorem the
outputs' rms is ``|c| sqrt(N)`` times the inputs' rms (exactly for fft/ifft; for rfft/irfft
the half spectrum's rms stands for the full one's, equal up to the DC and Nyquist terms). An absolute
limit applies to ``accuracy`` only: the other checks measure relative to sums of several
transforms' norms, for which no single input scale holds.

The rows are judged in the parent process after the worker made them (:func:`apply_limits`):
a row keeps its ``value`` and its built-in limit (``bound_limit``), takes the user's limit as
``limit`` and ``limit_source`` ``user``, and its status follows ``value <= limit``. A row the
built-in bound passes and the user's limit fails has the diagnosis ``user-limit`` (nothing the
battery can name is wrong: the error is within what a correct FFT of that size and precision
may reach); a row the built-in bound fails and the user's limit passes keeps the bound's
verdict in its message, and :func:`limit_notes` says so in the summary, so that a loose limit
never hides a bug silently.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from typing import Any, Iterable, Mapping, Sequence

from fftgauge.harness.errors import UsageError

#: The checks whose row ``value`` is a relative error a user limit can replace the bound of:
#: the value checks and the exact checks. ``all`` names every one of them.
LIMITED_CHECKS = ("accuracy", "linearity", "impulse", "time-shift", "parseval", "round-trip", "symmetry",
                  "modulation", "convolution", "pairs")

#: Fixed-point checks whose limit is a margin in dB (``sqnr=2dB``: at most 2 dB below the reference's
#: SQNR; harness/fixed/checks.py); ``all`` does not reach them.
MARGIN_CHECKS = ("sqnr",)

#: The name that sets a limit for every check of :data:`LIMITED_CHECKS` (a check's own limit wins).
ALL_CHECKS = "all"

#: Unit words as written -> the unit's canonical name.
UNIT_WORDS = {"eps": "eps", "rel": "relative", "relative": "relative", "db": "dB", "abs": "absolute",
              "absolute": "absolute"}

#: What a criterion looks like, for error messages.
CRITERION_FORMS = "8eps, 1e-3rel, -90dB or 1e-6abs@SCALE"

#: The diagnosis of a row within the built-in bound but above the user's limit.
USER_LIMIT_CODE = "user-limit"

#: Where a row's limit came from: the check's built-in bound, or the user's criterion.
LIMIT_SOURCES = ("bound", "user")

_CRITERION = re.compile(r"^\s*(?P<amount>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(?P<unit>[A-Za-z]*)"
                        r"\s*(?:@\s*(?P<scale>\S+))?\s*$")


@dataclass(frozen=True)
class Limit:
    """One user criterion, validated: ``amount`` in ``unit`` (``eps``, ``relative``, ``dB``,
    ``absolute``) for ``check`` (a name of :data:`LIMITED_CHECKS` or ``all``); ``scale`` the
    input rms amplitude of an absolute limit; ``text`` the criterion as the user wrote it;
    ``origin`` where it was given (``--limit`` or the file's path)."""

    check: str
    amount: float
    unit: str
    scale: float | None = None
    text: str = ""
    origin: str = "--limit"

    def describe(self) -> str:
        """Return the criterion in words, e.g. ``8 eps``, ``0.001 relative``, ``-90 dB``,
        ``1e-06 absolute rms at input rms 0.5``."""
        if self.unit == "absolute":
            return f"{self.amount:g} absolute rms at input rms {self.scale:g}"
        return f"{self.amount:g} {self.unit}"

    def relative_limit(self, dtype: str, n: int, norm: str, kind: str, declared_scale: str | None = None) -> float:
        """Return the criterion as a limit on a row's relative error for a case (see the module
        docstring for each unit's conversion). ``declared_scale`` (one of
        :data:`fftgauge.harness.dft.SCALES`) is the factor the backend declares it applies to this
        transform, whatever the norm; an absolute limit then uses it in place of the norm's factor.

        Raises
        ------
        ValueError
            For an unknown precision or norm (cannot happen for a row the battery made).
        """
        from fftgauge.harness.dft import machine_epsilon, norm_factor, scale_factor

        if self.check in MARGIN_CHECKS:  # a margin in dB (harness/fixed/checks.py), no conversion
            return self.amount
        if self.unit == "eps":
            return self.amount * machine_epsilon(dtype)
        if self.unit == "relative":
            return self.amount
        if self.unit == "dB":
            return 10.0 ** (self.amount / 20.0)
        factor = (scale_factor(int(n), declared_scale) if declared_scale else
                  norm_factor(int(n), norm, kind in ("ifft", "irfft")))
        gain = abs(factor) * math.sqrt(int(n))
        return self.amount / (self.scale * gain)

    def as_dict(self) -> dict[str, Any]:
        """Return the criterion as the results file records it (``request.limits``)."""
        out = {"criterion": self.describe(), "amount": self.amount, "unit": self.unit, "from": self.origin}
        if self.scale is not None:
            out["input_rms"] = self.scale
        return out


def _closest_check(name: str) -> str:
    close = difflib.get_close_matches(name, LIMITED_CHECKS + (ALL_CHECKS,), n=1)
    return f" (did you mean {close[0]}?)" if close else ""


def check_name(name: str, where: str) -> str:
    """Return ``name`` when a limit can be set for it (a check of :data:`LIMITED_CHECKS` or ``all``).

    Raises
    ------
    UsageError
        For a check that does not exist or whose rows have no relative error to limit.
    """
    from fftgauge.harness.battery.checks import CHECKS

    name = name.strip()
    if name in LIMITED_CHECKS or name == ALL_CHECKS or name in MARGIN_CHECKS:
        return name
    if name in CHECKS:
        raise UsageError(f"{where}: the {name} check takes no limit; checks with limits: "
                         f"{', '.join(LIMITED_CHECKS)} (or all)")
    raise UsageError(f"{where}: unknown check {name!r}{_closest_check(name)}; checks with limits: "
                     f"{', '.join(LIMITED_CHECKS)} (or all)")


def parse_criterion(check: str, text: str, where: str, origin: str = "--limit") -> Limit:
    """Return the :class:`Limit` that ``text`` (``AMOUNT UNIT``) sets for ``check``.

    ``where`` names the item in error messages (``--limit accuracy=8``, ``limits.toml: accuracy``).

    Raises
    ------
    UsageError
        For an unknown check, a missing or unknown unit, a negative or non-finite amount, a
        scale on a unit that takes none, an absolute limit without ``@SCALE`` (a positive input
        rms) or for a check other than ``accuracy``.
    """
    check = check_name(check, where)
    m = _CRITERION.match(str(text))
    if m is None:
        raise UsageError(f"{where}: {text!r} is not a criterion; write one of {CRITERION_FORMS}")
    amount = float(m.group("amount"))
    word, scale_text = m.group("unit"), m.group("scale")
    if not word:
        raise UsageError(f"{where}: {text.strip()!r} has no unit; write one of {CRITERION_FORMS}")
    unit = UNIT_WORDS.get(word.lower())
    if unit is None:
        raise UsageError(f"{where}: unknown unit {word!r}; units: eps, rel (relative), dB, abs@SCALE (absolute)")
    if not math.isfinite(amount):
        raise UsageError(f"{where}: the limit must be a finite number, got {m.group('amount')}")
    if amount < 0 and unit != "dB":
        raise UsageError(f"{where}: a limit cannot be negative ({text.strip()}); errors are at least 0")
    if check in MARGIN_CHECKS and (unit != "dB" or amount < 0 or scale_text is not None):
        raise UsageError(f"{where}: the {check} limit is a margin in dB below the fixed-point reference, e.g. 2dB")
    scale = None
    if unit == "absolute":
        if scale_text is None:
            raise UsageError(f"{where}: an absolute limit needs the input scale it holds at: {amount:g}abs@SCALE, "
                             f"SCALE the input's rms amplitude (a full-scale sine of peak A has rms A/sqrt(2))")
        try:
            scale = float(scale_text)
        except ValueError:
            raise UsageError(f"{where}: the input scale {scale_text!r} is not a number") from None
        if not (math.isfinite(scale) and scale > 0):
            raise UsageError(f"{where}: the input scale must be a positive rms amplitude, got {scale_text}")
        if check != "accuracy":
            raise UsageError(f"{where}: an absolute limit applies to accuracy only (the {check} check measures "
                             f"relative to sums of transforms' norms); use eps, rel or dB")
    elif scale_text is not None:
        raise UsageError(f"{where}: only an absolute limit takes @SCALE, not {unit}")
    return Limit(check=check, amount=amount, unit=unit, scale=scale, text=str(text).strip(), origin=origin)


def parse_limit_option(item: str) -> Limit:
    """Return the :class:`Limit` of one ``--limit [CHECK=]AMOUNT UNIT`` item (no ``CHECK=``: ``all``).

    Raises
    ------
    UsageError
        As :func:`parse_criterion`, naming the item.
    """
    where = f"--limit {item}"
    check, sep, text = str(item).partition("=")
    if not sep:
        check, text = ALL_CHECKS, item
    return parse_criterion(check, text, where)


def load_limits_file(path: str) -> list[Limit]:
    """Return the limits of a TOML file holding one ``[limits]`` table of ``CHECK = "AMOUNT UNIT"``.

    Raises
    ------
    UsageError
        For a file that cannot be read, does not parse as TOML, has keys other than
        ``limits``, a value that is not a string, or a bad criterion (the message names the file
        and the entry).
    """
    import tomllib

    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except OSError as exc:
        raise UsageError(f"cannot read the limits file {path}: {exc.strerror or exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise UsageError(f"the limits file {path} does not parse as TOML: {exc}") from None
    extra = [k for k in data if k != "limits"]
    if extra:
        raise UsageError(f"{path}: unknown key {extra[0]!r}; the file holds one [limits] table")
    table = data.get("limits")
    if not isinstance(table, dict) or not table:
        raise UsageError(f'{path}: no [limits] table; write e.g. [limits] then accuracy = "8 eps"')
    limits = []
    for check, text in table.items():
        where = f"{path}: limits.{check}"
        if not isinstance(text, str):
            raise UsageError(f'{where}: write the limit as a string with its unit, e.g. {check} = "8 eps"')
        limits.append(parse_criterion(check, text, where, origin=path))
    return limits


def build_limits(items: Mapping[str, str] | Sequence[str] | None = None,
                 path: str | None = None) -> tuple[Limit, ...]:
    """Return the validated limits of a run: the file's (``path``), then ``items`` on top (an
    item for a check the file names replaces the file's). One limit per check, ``all`` included.

    ``items`` are ``--limit`` strings or a mapping ``{check: "AMOUNT UNIT"}`` (the Python API).

    Raises
    ------
    UsageError
        As :func:`load_limits_file` and :func:`parse_limit_option`.
    """
    chosen: dict[str, Limit] = {}
    if path:
        for lim in load_limits_file(path):
            chosen[lim.check] = lim
    if isinstance(items, Mapping):
        parsed = [parse_criterion(str(k), str(v), f"limits[{k!r}]", origin="limits") for k, v in items.items()]
    else:
        parsed = [parse_limit_option(item) for item in (items or ())]
    for lim in parsed:
        chosen[lim.check] = lim
    return tuple(chosen.values())


def limit_for(limits: Iterable[Limit], check: str) -> Limit | None:
    """Return the limit that holds for ``check``: its own, else ``all``'s (for a check of
    :data:`LIMITED_CHECKS`), else None."""
    by_check = {lim.check: lim for lim in limits}
    if check in by_check:
        return by_check[check]
    return by_check.get(ALL_CHECKS) if check in LIMITED_CHECKS else None


def declared_scale(conventions: Any, kind: str) -> str | None:
    """Return the scale a backend's declared conventions (a
    :class:`~fftgauge.backends.claims.Conventions`, or None) give transforms of ``kind``, or None."""
    if conventions is None:
        return None
    return getattr(conventions, "inverse_scale" if kind in ("ifft", "irfft") else "forward_scale", None)


def judge_row(row: dict[str, Any], limit: Limit | None, conventions: Any = None) -> dict[str, Any]:
    """Return ``row`` (a check row as a dict) judged against ``limit``; a copy when changed.
    ``conventions`` are the backend's declared ones (their scale enters an absolute limit).

    Rows without a built-in limit (skip, error, a wrong shape) and rows of checks ``limit``
    does not hold for are returned as they are, with ``limit_source`` ``bound`` where they
    have a limit. See the module docstring for the rest.
    """
    bound = row.get("limit")
    if limit is None or bound is None or row.get("status") not in ("pass", "fail"):
        if bound is not None and row.get("limit_source") is None:
            return {**row, "limit_source": "bound"}
        return row
    user = limit.relative_limit(row["dtype"], row["n"], row.get("norm") or "backward", row["kind"],
                                declared_scale(conventions, row["kind"]))
    value = row.get("value")
    passes = value is not None and value <= user
    out = {**row, "limit": user, "limit_source": "user", "bound_limit": bound}
    words = f"your limit {limit.describe()} ({user:.3g})"
    if passes:
        out["status"], out["diagnosis"] = "pass", None
        if row["status"] == "fail":
            out["bound_diagnosis"] = row.get("diagnosis")
            out["message"] = (f"{row.get('message', '')}; passes {words} but not the built-in bound ({bound:.3g}), "
                              f"which diagnosed {row.get('diagnosis') or 'a failure'}")
    else:
        out["status"] = "fail"
        if row["status"] == "pass":
            out["diagnosis"] = USER_LIMIT_CODE
            out["message"] = (f"{row.get('message', '')}; above {words} though within the built-in bound "
                              f"({bound:.3g})")
        else:
            out["message"] = f"{row.get('message', '')}; above {words} and the built-in bound ({bound:.3g})"
    return out


def apply_limits(rows: list[dict[str, Any]], limits: Sequence[Limit], conventions: Any = None) -> list[dict[str, Any]]:
    """Return the rows of one backend judged against the user's limits (:func:`judge_row`; its
    declared ``conventions``, if any); unchanged rows as they are."""
    return [judge_row(row, limit_for(limits, row.get("check", "")), conventions) for row in rows]


def limit_notes(rows: Iterable[dict[str, Any]], limits: Mapping[str, Mapping[str, Any]] | None) -> list[str]:
    """Return one sentence per user limit comparing it with the built-in bound over the rows it
    judged, and one per check whose rows pass only because of a user limit.

    ``limits`` is the results file's ``request.limits`` (check -> :meth:`Limit.as_dict`).
    A limit looser than the bound says that a bug below it would not be caught; a stricter one
    that a correct implementation may fail it.
    """
    if not limits:
        return []
    judged: dict[str, list[dict[str, Any]]] = {}
    for row in rows:
        if row.get("limit_source") == "user" and row.get("bound_limit"):
            judged.setdefault(row["check"], []).append(row)
    notes = []
    for name, info in limits.items():
        own = [r for c, rs in judged.items() for r in rs if c == name or (name == ALL_CHECKS and c not in limits)]
        criterion = info.get("criterion", "?")
        name = "every value check" if name == ALL_CHECKS else name
        if not own:
            notes.append(f"limit for {name} is {criterion}: no row of this run was judged by it")
            continue
        factors = sorted(r["limit"] / r["bound_limit"] for r in own)
        low, high = factors[0], factors[-1]
        span = f"{low:.3g}" if math.isclose(low, high, rel_tol=0.005) else f"{low:.3g}..{high:.3g}"
        looser = sum(f > 1 for f in factors)
        if looser == len(factors):
            notes.append(f"limit for {name} is {criterion}, looser than the built-in bound by {span} x: "
                         f"a bug below it would not be caught")
        elif looser == 0:
            notes.append(f"limit for {name} is {criterion}, stricter than the built-in bound ({span} x of it): "
                         f"a correct implementation may fail it")
        else:
            notes.append(f"limit for {name} is {criterion}, {span} x the built-in bound: looser than it on "
                         f"{looser} of {len(factors)} rows, where a bug below it would not be caught")
    hidden = [r for rs in judged.values() for r in rs
              if r.get("status") == "pass" and r.get("value") is not None and r["value"] > r["bound_limit"]]
    if hidden:
        from fftgauge.harness.report.check_tables import compress_sizes

        per_check = dict.fromkeys(r["check"] for r in hidden)
        codes = sorted({r.get("bound_diagnosis") or "unknown" for r in hidden})
        where = "; ".join(f"{name} at n = {compress_sizes([r['n'] for r in hidden if r['check'] == name])}"
                          for name in per_check)
        notes.append(f"{len(hidden)} row(s) pass only under the user's limit: the built-in bound fails them "
                     f"(diagnosis {', '.join(codes)}): {where}")
    return notes

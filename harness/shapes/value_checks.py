"""The value checks of a shaped case: the 1-D battery's checks carried to arrays.

``accuracy``, ``linearity``, ``impulse``, ``time-shift``, ``parseval``, ``round-trip``,
``symmetry``, ``convolution`` and ``pairs``, each a function of a
:class:`~fftgauge.harness.shapes.context.ShapedContext` returning rows. Tolerances follow the
1-D battery's rule (:mod:`fftgauge.harness.battery.value_checks`): every computed transform is
trusted to ``limit`` of its own norm, errors of the transforms a check combines add, plus the
rounding allowance; a half spectrum's error counts up to sqrt(2) in the full one.

The N-D DFT over axes ``j = 1..d`` of lengths ``N_j`` (every other axis a batch index) is

    X[k] = c sum_n x[n] prod_j exp(-+2 pi i k_j n_j / N_j),

``c`` the normalisation factor of N = prod N_j. Its properties are the 1-D ones axis by axis
(Bracewell, The Fourier Transform and Its Applications, ch. on the 2-D transform; Oppenheim &
Schafer, Discrete-Time Signal Processing, 3rd ed., Table 8.2 per axis; from memory, each
verified numerically in ``tests/test_shapes_checks.py``): an impulse at ``m`` gives the product
of exponentials ``prod_j W_j^(k_j m_j)``; a circular shift by ``m_j`` along each axis multiplies
by the same product (shift theorem); energy is kept up to ``c^2 N`` (Parseval); the transform of
a circular convolution over the axes is the product of the transforms over ``c``; a real array
has a Hermitian transform ``X[-k] = conj X[k]``; a separable array ``prod_j s_j[n_j]`` has the
separable transform ``prod_j S_j[k_j]``.
"""

from __future__ import annotations

import numpy as np

from fftgauge.harness.battery.context import SQRT2, OutputProblem, fmt_eps, norm2, phases, ratio, relative
from fftgauge.harness.battery.value_checks import accuracy_measures, accuracy_rows, parseval_rows
from fftgauge.harness.rows import CheckRow
from fftgauge.harness.shapes.case import ShapeCase
from fftgauge.harness.shapes.context import ShapedContext, reverse_axes

#: Integer inputs of ``convolution`` lie in [-CONVOLUTION_RANGE, CONVOLUTION_RANGE].
CONVOLUTION_RANGE = 8
#: Non-zero entries of the sparse kernel ``convolution`` convolves with.
KERNEL_TERMS = 3


def axis_phase(case: ShapeCase, sign: int, m: tuple[int, ...], work_dtype: np.dtype, shape: tuple[int, ...]) -> np.ndarray:
    """Return ``prod_j exp(sign 2 pi i k_j m_j / N_j)`` over the transformed axes, broadcast to
    ``shape`` (the index ``k_j`` runs over ``shape``'s length along axis ``j``)."""
    out = np.ones([1] * len(shape), dtype=work_dtype)
    for axis, n, mj in zip(case.axes_normalised, case.lengths, m):
        k = np.arange(shape[axis], dtype=np.int64)
        view = [1] * len(shape)
        view[axis] = shape[axis]
        out = out * phases(sign * k * mj, n, work_dtype).reshape(view)
    return np.broadcast_to(out, shape)


def full_weights(case: ShapeCase, shape: tuple[int, ...]) -> np.ndarray:
    """Return the weights that turn a half spectrum's |X|^2 into the full spectrum's energy:
    2 for the bins along the halved axis that stand for two, 1 for bin 0 and (even N) N/2."""
    axis, n = case.halved_axis, case.lengths[-1]
    w = np.full(shape[axis], 2.0)
    w[0] = 1.0
    if n % 2 == 0:
        w[n // 2] = 1.0
    view = [1] * len(shape)
    view[axis] = shape[axis]
    return w.reshape(view)


def hermitian_full_nd(half: np.ndarray, case: ShapeCase) -> np.ndarray:
    """Return the full spectrum (logical shape) a half spectrum stands for: the missing bins
    ``k`` of the halved axis are ``conj X[-k]``, the index reversed over every transformed axis."""
    axis, n = case.halved_axis, case.lengths[-1]
    full = np.zeros(case.shape, dtype=np.result_type(half.dtype, np.complex64))
    kept = [slice(None)] * half.ndim
    kept[axis] = slice(0, half.shape[axis])
    full[tuple(kept)] = half
    mirror = np.conj(reverse_axes(full, case.axes_normalised))
    rest = [slice(None)] * half.ndim
    rest[axis] = slice(n // 2 + 1, n)
    full[tuple(rest)] = mirror[tuple(rest)]
    return full


def _half(full: np.ndarray, case: ShapeCase) -> np.ndarray:
    index = [slice(None)] * full.ndim
    index[case.halved_axis] = slice(0, case.lengths[-1] // 2 + 1)
    return full[tuple(index)]


# -- accuracy and Ergün's three --------------------------------------------------------------------

def check_accuracy(ctx: ShapedContext) -> list[CheckRow]:
    """Relative rms error against the ground truth (axis by axis in extended precision), on a
    Gaussian and a uniform input; fails above the shaped limit."""
    worst = None
    for dist in ("gaussian", "uniform"):
        x = ctx.random_input(f"accuracy-{dist}", distribution=dist)
        raw = ctx.run(x)
        ctx.output(raw, x=x)
        ref = ctx.reference_fn(x, ctx.case)
        rel2, rel_max = accuracy_measures(ref, raw)
        if worst is None or not rel2 <= worst[0]:
            worst = (rel2, rel_max, dist, x, raw, ref.method)
    return accuracy_rows(ctx, worst)


def check_linearity(ctx: ShapedContext) -> list[CheckRow]:
    """F(a x + b y) against a F(x) + b F(y) (real coefficients for the real kinds), relative to
    S = norm F(ax+by) + |a| norm F(x) + |b| norm F(y): at most ``limit`` plus rounding."""
    x, y = ctx.random_input("linearity-x"), ctx.random_input("linearity-y")
    rng = ctx.rng("linearity-coefficients")
    a, b = rng.standard_normal(2) if ctx.case.is_real else rng.standard_normal(2) + 1j * rng.standard_normal(2)
    w = ctx.work_dtype
    z = ctx.as_input(a * x.astype(w) + b * y.astype(w))
    raw = ctx.run(x)
    fx, fy, fz = ctx.output(raw, x=x), ctx.transform(y), ctx.transform(z)
    s = norm2(fz) + abs(a) * norm2(fx) + abs(b) * norm2(fy)
    value = relative(fz - (a * fx + b * fy), s)
    msg = (f"F(a x + b y) - (a F(x) + b F(y)) is {fmt_eps(value, ctx.case.dtype)} of the transforms' norms "
           f"(a = {a:.3g}, b = {b:.3g})")
    return [ctx.verdict("linearity", value, ctx.limit + ctx.rounding, msg, x, raw)]


def impulse_positions(ctx: ShapedContext) -> list[tuple[int, ...]]:
    """Return the impulse positions (full index into the input array): the origin and one
    random off-origin position (for the real inverse kinds, a bin standing for two, off the
    planes 0 and N/2 of the halved axis, when the halved length is at least 3)."""
    case = ctx.case
    rng = ctx.rng("impulse")
    shape = case.input_shape
    origin = tuple(0 for _ in shape)
    other = tuple(int(rng.integers(0, n)) for n in shape)
    if case.base_kind == "irfft":
        n = case.lengths[-1]
        if n < 3:
            return [origin]
        other = list(other)
        other[case.halved_axis] = int(rng.integers(1, (n - 1) // 2 + 1))
        other = tuple(other)
    return [origin] if other == origin else [origin, other]


def impulse_response(ctx: ShapedContext, m: tuple[int, ...]) -> np.ndarray:
    """Return the exact output for a unit impulse at input index ``m`` (closed form).

    Complex and real forward kinds: ``c prod_j exp(-+2 pi i k_j m_j / N_j)`` in the batch row of
    ``m`` (zero in the others); real inverse kinds (an impulse at a half-spectrum bin standing
    for itself and its conjugate partner): ``c`` at the origin, else ``2 c cos(2 pi sum_j k_j m_j / N_j)``.
    """
    case, w = ctx.case, ctx.work_dtype
    shape = case.output_shape
    tm = tuple(m[a] for a in case.axes_normalised)
    if case.base_kind == "irfft":
        ph = axis_phase(case, 1, tm, w, shape)
        values = ph.real * (1 if all(v == 0 for v in tm) else 2)
    else:
        values = axis_phase(case, 1 if case.is_inverse else -1, tm, w, shape)
    out = np.zeros(shape, dtype=w)
    index = tuple(slice(None) if a in case.axes_normalised else m[a] for a in range(len(shape)))
    out[index] = (values * ctx.scale())[index]
    return out


def check_impulse(ctx: ShapedContext) -> list[CheckRow]:
    """N-D impulse at the origin and off it against the separable closed form
    (:func:`impulse_response`): at most ``limit`` plus rounding, relative to its norm."""
    case = ctx.case
    worst = (-1.0, None, None, None)
    positions = impulse_positions(ctx)
    for m in positions:
        x = np.zeros(case.input_shape, dtype=case.input_dtype)
        x[m] = 1
        raw = ctx.run(x)
        y = ctx.output(raw, x=x)
        expected = impulse_response(ctx, m)
        value = relative(y - expected, norm2(expected))
        if not value <= worst[0]:
            worst = (value, m, x, raw)
    value, m, x, raw = worst
    where = "; ".join(",".join(map(str, p)) for p in positions)
    msg = f"impulses at ({where}): worst at ({','.join(map(str, m))}) off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("impulse", value, ctx.limit + ctx.rounding, msg, x, raw)]


def check_time_shift(ctx: ShapedContext) -> list[CheckRow]:
    """Circular shift by a random ``m_j`` along every transformed axis against the output
    times ``prod_j W_j^(k_j m_j)`` (shift theorem per axis); for the real inverse kinds the
    phase ramp goes on the half spectrum and the output must roll. Relative to the sum of the
    two computed transforms' norms: at most ``limit`` plus rounding."""
    case = ctx.case
    rng = ctx.rng("time-shift")
    m = tuple(int(rng.integers(0, n)) for n in case.lengths)
    x = ctx.random_input("time-shift")
    raw = ctx.run(x)
    fx = ctx.output(raw, x=x)
    if case.base_kind == "irfft":
        shifted = ctx.as_input(x.astype(ctx.work_dtype) * axis_phase(case, -1, m, ctx.work_dtype, case.input_shape))
        lhs = ctx.transform(shifted)
        rhs = np.roll(fx, m, axis=case.axes_normalised)
        what = f"a phase ramp for a shift of ({','.join(map(str, m))}) on the spectrum vs the output rolled"
    else:
        lhs = ctx.transform(np.roll(x, m, axis=case.axes_normalised))
        rhs = axis_phase(case, 1 if case.is_inverse else -1, m, ctx.work_dtype, case.output_shape) * fx
        what = f"x rolled by ({','.join(map(str, m))}) along axes {case.axes} vs the output times the phases"
    value = relative(lhs - rhs, norm2(lhs) + norm2(fx))
    return [ctx.verdict("time-shift", value, ctx.limit + ctx.rounding, f"{what}: off by {fmt_eps(value, case.dtype)}",
                        x, raw)]


# -- energy, inverse, symmetry ------------------------------------------------------------------

def _energy(v: np.ndarray, weights: np.ndarray | float = 1.0) -> np.longdouble:
    w = v.astype(np.clongdouble)
    return np.sum((w.real ** 2 + w.imag ** 2) * weights)


def check_parseval(ctx: ShapedContext) -> list[CheckRow]:
    """Energy: sum |F(x)|^2 = c^2 N sum |x|^2 over the whole array (every batch row obeys it),
    half spectra counted for the full ones they stand for. Tolerance as in 1-D:
    2 g limit + (g limit)^2 + rounding, g = sqrt(2) for a half-spectrum output."""
    case = ctx.case
    x = ctx.random_input("parseval")
    raw = ctx.run(x)
    y = ctx.output(raw, x=x)
    e_in = _energy(x, full_weights(case, x.shape)) if case.base_kind == "irfft" else _energy(x)
    e_out = _energy(y, full_weights(case, y.shape)) if case.base_kind == "rfft" else _energy(y)
    return parseval_rows(ctx, x, raw, e_in, e_out, np.longdouble(ctx.scale()), case.points, case.base_kind == "rfft")


def check_round_trip(ctx: ShapedContext) -> list[CheckRow]:
    """The companion inverse of the same backend gives back the input (ifftn(fftn(x)), ...);
    skipped without it. Relative to norm(x): g limit + the companion's limit + rounding."""
    plan, comp, reason = ctx.companion()
    if plan is None:
        return [ctx.row("round-trip", "skip", message=f"needs {comp.kind}: {reason}")]
    case = ctx.case
    x = ctx.random_input("round-trip")
    raw = ctx.run(x)
    y = ctx.output(raw, x=x)
    back = ctx.transform(ctx.as_input(y, comp), plan, comp)
    target = x.astype(ctx.work_dtype)
    value = relative(back - target, norm2(target))
    tol = (SQRT2 if case.is_real else 1.0) * ctx.limit + ctx.limit_of(comp) + ctx.rounding
    msg = f"{comp.kind}({case.kind}(x)) misses x by {fmt_eps(value, case.dtype)}"
    if np.isfinite(value) and value <= tol:
        return [ctx.row("round-trip", "pass", value, tol, message=msg)]
    found = ctx.random_diagnosis()
    if found is None:
        found = ("unknown", f"{case.kind} is accurate, so {comp.kind} is at fault")
    return [ctx.row("round-trip", "fail", value, tol, diagnosis=found[0], message=f"{msg}; {found[1]}")]


def check_symmetry(ctx: ShapedContext) -> list[CheckRow]:
    """Symmetries of real arrays over the transformed axes.

    Complex kinds: a real input gives a Hermitian output, ``X[-k] = conj X[k]``. Real forward
    kinds: within the kept half, the planes at bin 0 and (even N) N/2 of the halved axis obey
    ``X[-k] = conj X[k]`` along the other axes, and a real even input (``x[-n] = x[n]``) gives
    a real output. Real inverse kinds: a real half spectrum gives an even output. Relative to
    2 norm(X) (an output against itself) or norm(X) (against zero): ``limit`` plus rounding.
    """
    case = ctx.case
    axes = case.axes_normalised
    rng = ctx.rng("symmetry")
    parts = []
    if case.base_kind == "irfft":
        x = ctx.as_input(rng.standard_normal(case.input_shape) + 0j)
        raw = ctx.run(x)
        out = ctx.output(raw, x=x)
        parts.append(("real spectrum -> even output", relative(reverse_axes(out, axes) - out, 2 * norm2(out)), x, raw))
    else:
        x = ctx.as_input(rng.standard_normal(case.input_shape))
        raw = ctx.run(x)
        out = ctx.output(raw, x=x)
        if case.base_kind == "rfft":
            index = [slice(None)] * out.ndim
            n = case.lengths[-1]
            index[case.halved_axis] = [0, n // 2] if n % 2 == 0 else [0]
            planes = out[tuple(index)]
            others = tuple(a for a in axes if a != case.halved_axis)
            parts.append(("real input -> Hermitian planes 0 and N/2",
                          relative(reverse_axes(planes, others) - np.conj(planes), 2 * norm2(planes)), x, raw))
            v = rng.standard_normal(case.input_shape)
            even = ctx.as_input((v + reverse_axes(v, axes)) / 2)
            raw_e = ctx.run(even)
            out_e = ctx.output(raw_e, x=even)
            parts.append(("real even -> real", ratio(norm2(out_e.imag), norm2(out_e)), even, raw_e))
        else:
            parts.append(("real input -> Hermitian output",
                          relative(reverse_axes(out, axes) - np.conj(out), 2 * norm2(out)), x, raw))
    worst = max(parts, key=lambda p: p[1] if np.isfinite(p[1]) else float("inf"))
    msg = "; ".join(f"{name}: {fmt_eps(v, case.dtype)}" for name, v, _, _ in parts)
    return [ctx.verdict("symmetry", worst[1], ctx.limit + ctx.rounding, msg, worst[2], worst[3])]


# -- exact inputs ------------------------------------------------------------------------------

def integer_array(ctx: ShapedContext, purpose: str) -> np.ndarray:
    """Return an input of small integers (exact in every precision), valid for the case: real
    for the real forward kinds, the half of a Hermitian integer spectrum for the real inverse."""
    case = ctx.case
    rng = ctx.rng(purpose)
    r = CONVOLUTION_RANGE
    if case.base_kind == "rfft":
        return rng.integers(-r, r + 1, case.input_shape).astype(case.input_dtype)
    if case.base_kind == "irfft":
        g = rng.integers(-r, r + 1, case.shape) + 1j * rng.integers(-r, r + 1, case.shape)
        return ctx.as_input(_half(g + np.conj(reverse_axes(g, case.axes_normalised)), case))
    return ctx.as_input(rng.integers(-r, r + 1, case.input_shape) + 1j * rng.integers(-r, r + 1, case.input_shape))


def sparse_kernel(ctx: ShapedContext) -> list[tuple[tuple[int, ...], complex]]:
    """Return the kernel ``h`` of ``convolution`` as (offset over the transformed axes, value)
    terms: a few small integers (Hermitian pairs for the real inverse kinds, real for rfft)."""
    case = ctx.case
    rng = ctx.rng("convolution-kernel")
    terms = []
    for _ in range(KERNEL_TERMS):
        d = tuple(int(rng.integers(0, n)) for n in case.lengths)
        v = complex(int(rng.integers(1, 4)), 0 if case.base_kind == "rfft" else int(rng.integers(-3, 4)))
        terms.append((d, v))
        if case.base_kind == "irfft":
            terms.append((tuple((-dj) % n for dj, n in zip(d, case.lengths)), v.conjugate()))
    return terms


def circular_convolution(ctx: ShapedContext, x: np.ndarray, terms, shape: tuple[int, ...]) -> np.ndarray:
    """Return ``x (*) h`` over the transformed axes (each batch row alone), exactly: a sum of
    rolled copies of the integer array ``x`` times small integers, all exact in binary64."""
    case = ctx.case
    full = hermitian_full_nd(x.astype(np.complex128), case) if case.base_kind == "irfft" else x.astype(np.complex128)
    z = np.zeros(shape, dtype=np.complex128)
    for d, v in terms:
        z += v * np.roll(full, d, axis=case.axes_normalised)
    return z


def kernel_array(ctx: ShapedContext, terms, shape: tuple[int, ...]) -> np.ndarray:
    """Return the kernel as an array of ``shape``: the terms at their offsets in every batch row."""
    case = ctx.case
    h = np.zeros(shape, dtype=np.complex128)
    for d, v in terms:
        index = [slice(None)] * len(shape)
        for axis, dj in zip(case.axes_normalised, d):
            index[axis] = dj
        h[tuple(index)] += v
    return h


def check_convolution(ctx: ShapedContext) -> list[CheckRow]:
    """Circular convolution theorem over the transformed axes: F(x (*) h) = F(x) F(h) / c.

    ``x`` is small random integers and ``h`` a sparse integer kernel, so ``x (*) h`` is formed
    exactly; for the real inverse kinds the convolution is of the Hermitian full spectra and
    its half goes in. Measured relative to norm F(x (*) h); the product of two computed
    transforms is off by at most ``limit`` times S = (norm F(x) max|F(h)| + max|F(x)| norm F(h)) / |c|
    (plus ``limit^2``), and F(x (*) h) by its own ``limit``, plus rounding.
    """
    case = ctx.case
    x = integer_array(ctx, "convolution-x")
    terms = sparse_kernel(ctx)
    full_shape = case.shape if case.base_kind == "irfft" else case.input_shape
    z = circular_convolution(ctx, x, terms, full_shape)
    h = kernel_array(ctx, terms, full_shape)
    if case.base_kind == "irfft":
        z, h = _half(z, case), _half(h, case)
    raw = ctx.run(x)
    fx = ctx.output(raw, x=x)
    fh, fz = ctx.transform(ctx.as_input(h)), ctx.transform(ctx.as_input(z))
    c = ctx.scale()
    product = fx * fh / c
    s = (norm2(fx) * float(np.max(np.abs(fh))) + float(np.max(np.abs(fx))) * norm2(fh)) / abs(c)
    value = relative(fz - product, norm2(fz))
    tol = ctx.limit + (ctx.limit + ctx.limit ** 2) * ratio(s, norm2(fz)) + ctx.rounding
    msg = f"F(x (*) h) vs F(x) F(h) / c, h of {len(terms)} integer terms: off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("convolution", value, tol, msg, x, raw)]


def check_pairs(ctx: ShapedContext) -> list[CheckRow]:
    """Separable closed-form pairs: the outer product of 1-D pairs of
    :data:`fftgauge.harness.battery.pairs.PAIRS` (a different one per axis where possible, real
    pairs for the real forward kinds), each batch row weighted by 1, 2 or 3, against the product
    of the closed forms times ``c``. Tolerance: ``limit`` plus the closed forms' allowance per axis.
    The real inverse kinds are skipped (a separable Hermitian input needs real closed forms on
    every axis; ``impulse`` and ``symmetry`` check them)."""
    from fftgauge.harness.battery.exact_checks import pair_setup
    from fftgauge.harness.battery.pairs import PAIRS, closed_form_allowance

    case = ctx.case
    if case.base_kind == "irfft":
        return [ctx.row("pairs", "skip", message="no separable closed-form pair is built for the real inverse kinds")]
    shape = case.input_shape
    x = np.ones([1] * len(shape), dtype=np.complex128)
    e = np.ones([1] * len(case.output_shape), dtype=np.complex128)
    names = []
    for position, axis in enumerate(case.axes_normalised):
        line = case.line_case(position)
        usable = [p for p in PAIRS if p.applies(line.n) and p.compare == "full" and (p.real or not case.is_real)
                  and pair_setup(line, p) is not None]
        if not usable:
            return [ctx.row("pairs", "skip", message=f"no closed-form pair applies along axis {case.axes[position]}")]
        pair = usable[position % len(usable)]
        values, expected, _ = pair_setup(line, pair)
        view = [1] * len(shape)
        view[axis] = -1
        x = x * np.asarray(values).reshape(view)
        e = e * np.asarray(expected).reshape(view)
        names.append(pair.name)
    weights = np.ones(shape)
    for axis in range(len(shape)):
        if axis not in case.axes_normalised:
            view = [1] * len(shape)
            view[axis] = -1
            weights = weights * (1 + np.arange(shape[axis]) % 3).reshape(view)
    x = ctx.as_input(np.broadcast_to(x, shape) * weights)
    out_weights = weights if case.base_kind != "rfft" else weights[tuple(
        slice(0, 1) if a == case.halved_axis else slice(None) for a in range(len(shape)))]
    expected = np.broadcast_to(e, case.output_shape) * out_weights * ctx.scale()
    raw = ctx.run(x)
    y = ctx.output(raw, x=x)
    value = relative(y - expected.astype(ctx.work_dtype), norm2(expected))
    tol = ctx.limit + len(names) * closed_form_allowance(case.dtype)
    msg = f"separable pair {' x '.join(names)}: off by {fmt_eps(value, case.dtype)}"
    return [ctx.verdict("pairs", value, tol, msg, x, raw)]

"""Proven (or stated) error of each activation implementation an artifact may execute.

Every artifact evaluates tanh (a logistic node as 1/2 + tanh(z/2)/2, except ONNX's Sigmoid). The
bound needs, per implementation, a number E with |impl(z) - tanh(z)| <= E for every argument:

* ``table`` (float C and fixed point): linear interpolation between stored entries. Per interval k
  the error e(f) = T_k (1 - f) + T_k+1 f - tanh((k + f) h) has e'' = -h^2 tanh''; sampled at S + 1
  points, its maximum over the interval is at most the sampled maximum plus (h / S)^2 / 8 times
  max |tanh''| over the interval (the remainder of linear interpolation between samples). So the
  per-interval errors below are proven, not estimated, and a node whose arguments stay in a few
  intervals is charged their error only.
* ``rational`` in float32: every float32 argument was evaluated exactly as the generated C does
  (float32 operations, no contraction; :func:`rational_float32`), and the largest error is kept
  here; a slow test re-runs that exhaustive check. In float64, the approximation error is proven on
  [0, 9] by sampling with the same second-derivative remainder, per sub-interval, and the float64
  evaluation's rounding added.
* a C library's tanh/tanhf and an ONNX runtime's Tanh/Sigmoid cannot be proven from here: the
  bound assumes they are within ``LIBM_ULPS`` / ``RUNTIME_ULPS`` units in the last place of the exact
  result, which every artifact states. ``tests/benchmarks/activation_ulps.py`` measures them over
  every float32 argument (glibc's tanhf and onnxruntime's Tanh, Sigmoid).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# Assumed accuracy of runtime activations, in units in the last place of the exact result.
# glibc documents at most 2 ulp for tanhf and tanh on common targets (from memory of its table of
# known maximal errors); measured here: see tests/benchmarks/activation_ulps.py.
LIBM_ULPS = 2.0
# onnxruntime's Tanh measured up to 5.5 ulp and Sigmoid 2.9 ulp over every float32 argument
# (onnxruntime 1.2x-1.3x, x86-64); 8 ulp leaves room for other builds of the same kernels.
RUNTIME_ULPS = 8.0
# numpy's float64 tanh, which the reference uses (libm or a SIMD kernel): assumed 4 ulp.
NUMPY_ULPS = 4.0

_TANH_CURVATURE_PEAK = (0.6584789484624084, 0.7698003589195010)  # argmax and max of |tanh''|
_SAMPLES = 32


def _max_curvature(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """max |tanh''| over [a, b] with 0 <= a <= b (|tanh''| rises to its peak, then falls)."""
    def curvature(z):
        t = np.tanh(z)
        return 2.0 * t * (1.0 - t * t)

    peak, top = _TANH_CURVATURE_PEAK
    inside = (a <= peak) & (peak <= b)
    return np.where(inside, top, np.maximum(curvature(a), curvature(b))) * (1.0 + 1e-12)


@dataclass(frozen=True, eq=False)
class TableErrors:
    """Proven errors of a linear-interpolation tanh table with knots at k h, k = 0..size.

    ``per_interval`` (size,) bounds |T(z) - tanh(z)| on [k h, (k + 1) h]; ``tail`` bounds it for
    z >= size h, where the implementations return the last entry. Odd symmetry covers z < 0.
    """

    step: float
    per_interval: np.ndarray
    tail: float
    sparse: tuple

    @property
    def size(self) -> int:
        return self.per_interval.size

    @property
    def worst(self) -> float:
        return float(max(self.per_interval.max(), self.tail))

    def over(self, abs_low: np.ndarray, abs_high: np.ndarray) -> np.ndarray:
        """Largest error for arguments with |z| in [abs_low, abs_high] (arrays of one shape)."""
        k_lo = np.clip(np.floor(abs_low / self.step), 0, self.size - 1).astype(np.int64)
        k_hi = np.clip(np.floor(abs_high / self.step), 0, self.size - 1).astype(np.int64)
        span = k_hi - k_lo + 1
        level = np.floor(np.log2(span)).astype(np.int64)
        result = np.zeros(np.shape(abs_low))
        for lv in np.unique(level):
            mask = level == lv
            table = self.sparse[lv]
            result[mask] = np.maximum(table[k_lo[mask]], table[k_hi[mask] - (1 << lv) + 1])
        beyond = abs_high >= self.size * self.step
        return np.where(beyond, np.maximum(result, self.tail), result)


def table_errors(values, step: float) -> TableErrors:
    """Proven per-interval errors of the table ``values`` (the entries as the artifact stores
    them, as exact reals; knots at k ``step``)."""
    values = np.asarray(values, dtype=np.float64)
    size = values.size - 1
    frac = np.linspace(0.0, 1.0, _SAMPLES + 1)
    knots = np.arange(size)[:, None] + frac[None, :]
    line = values[:-1, None] * (1.0 - frac) + values[1:, None] * frac
    sampled = np.max(np.abs(line - np.tanh(knots * step)), axis=1)
    a, b = np.arange(size) * step, np.arange(1, size + 1) * step
    remainder = (step / _SAMPLES) ** 2 / 8.0 * _max_curvature(a, b)
    per_interval = sampled + remainder + 4e-16  # float64 evaluation of the samples
    reach_value = float(np.tanh(size * step))
    tail = max(abs(values[-1] - reach_value), abs(1.0 - values[-1])) + 4e-16
    sparse = [per_interval]
    while (1 << len(sparse)) <= size:
        prev, half = sparse[-1], 1 << (len(sparse) - 1)
        sparse.append(np.maximum(prev[:-half], prev[half:]))
    return TableErrors(step, per_interval, tail, tuple(sparse))


def rational_float32(z: np.ndarray, numerator=None, denominator=None, clip=None) -> np.ndarray:
    """The generated C's rational tanh in float32, operation by operation (no contraction)."""
    from nodecast.compiler.backends.c_float import (
        RATIONAL_CLIP,
        RATIONAL_DENOMINATOR,
        RATIONAL_NUMERATOR,
    )

    f = np.float32
    n = [f(c) for c in (numerator or RATIONAL_NUMERATOR)]
    d = [f(c) for c in (denominator or RATIONAL_DENOMINATOR)]
    z = np.asarray(z, dtype=np.float32)
    magnitude = np.abs(z)
    clipped = np.minimum(magnitude, f(clip or RATIONAL_CLIP))
    v = np.where(z < 0, -clipped, clipped)
    s = v * v
    p = v * (n[0] + s * (n[1] + s * (n[2] + s * (n[3] + s * n[4]))))
    q = d[0] + s * (d[1] + s * (d[2] + s * (d[3] + s * d[4])))
    return p / q


def exhaustive_rational_float32_error(limit: float = 20.0) -> float:
    """max |rational_float32(z) - tanh(z)| over every float32 z in [0, limit] (the function is
    exactly odd: negation is exact), plus the float64 tanh's own rounding."""
    top = int(np.float32(limit).view(np.uint32))
    worst = 0.0
    chunk = 1 << 24
    for start in range(0, top + 1, chunk):
        z = np.arange(start, min(start + chunk, top + 1), dtype=np.uint32).view(np.float32)
        err = np.abs(rational_float32(z).astype(np.float64) - np.tanh(z.astype(np.float64)))
        worst = max(worst, float(err.max()))
    return worst + 2.0**-52


# Result of exhaustive_rational_float32_error() (every float32 in [0, 20]; beyond, the clip makes
# the value constant and tanh only nearer 1), rounded up; tests/compiler/test_certified_bounds.py
# re-runs it.
RATIONAL_FLOAT32_ERROR = 3.73e-7  # measured 3.7274e-07 (52 s of CPU)


def proven_rational_error(pieces: int = 9000, samples: int = 64) -> float:
    """A proven bound of |x P(x^2)/Q(x^2) - tanh x| in exact arithmetic for every real x (the
    generated C clips |x| at 9). On each of ``pieces`` sub-intervals [a, b] of [0, 9], the error
    is sampled at ``samples`` + 1 points and the linear-interpolation remainder added, with
    |e''| <= |r''| + max |tanh''| and |r''| bounded from N = x P(x^2), D = Q(x^2): all their
    coefficients are positive, so N, D and their derivatives are increasing on x >= 0."""
    from nodecast.compiler.backends.c_float import (
        RATIONAL_CLIP,
        RATIONAL_DENOMINATOR,
        RATIONAL_NUMERATOR,
    )

    numerator = np.zeros(10)
    numerator[1::2] = RATIONAL_NUMERATOR
    denominator = np.zeros(9)
    denominator[0::2] = RATIONAL_DENOMINATOR
    N, D = np.polynomial.Polynomial(numerator), np.polynomial.Polynomial(denominator)
    edges = np.linspace(0.0, RATIONAL_CLIP, pieces + 1)
    a, b = edges[:-1], edges[1:]
    bound_r2 = (N.deriv(2)(b) / D(a) + 2 * N.deriv(1)(b) * D.deriv(1)(b) / D(a) ** 2
                + N(b) * D.deriv(2)(b) / D(a) ** 2 + 2 * N(b) * D.deriv(1)(b) ** 2 / D(a) ** 3)
    spacing = (b - a) / samples
    x = a[:, None] + spacing[:, None] * np.arange(samples + 1)[None, :]
    sampled = np.max(np.abs(N(x) / D(x) - np.tanh(x)), axis=1)
    inside = np.max(sampled + spacing**2 / 8.0 * (bound_r2 + 0.7699)) + 1e-14
    at_clip = N(RATIONAL_CLIP) / D(RATIONAL_CLIP)
    tail = max(abs(at_clip - np.tanh(RATIONAL_CLIP)), abs(at_clip - 1.0)) + 1e-14
    return float(max(inside, tail))


# proven_rational_error() rounded up, plus the float64 evaluation's rounding: Horner's rule on
# positive terms and one division stay within 30 roundings of the result (|r| <= 1).
RATIONAL_FLOAT64_ERROR = 1.87e-8 + 30 * 2.0**-53

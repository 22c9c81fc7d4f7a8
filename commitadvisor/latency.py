"""Latency profiles: frozen distribution objects in milliseconds, and their algebra.

Every profile offers ``cdf``, ``sf``, ``quantile`` (vectorised over numpy arrays),
``mean_ms``, ``second_moment_ms2``, ``laplace`` (E[exp(-s X)], s in 1/ms) and
``sample(rng, size)``. Closed forms are used where they exist; derived distributions (sums,
minima, maxima, residuals, mixtures of derived parts) live on a two-scale numeric grid: a
fine uniform grid over the body and a coarse uniform grid out to the far tail, each
convolved by FFT. The mass that falls beyond the coarse grid is kept in ``lost_mass``.

Only numpy at import time; scipy.special is imported inside the functions that need it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

__all__ = [
    "Latency",
    "Fixed",
    "Exponential",
    "Lognormal",
    "Gamma",
    "Weibull",
    "Table",
    "Empirical",
    "Mixture",
    "GridLatency",
    "from_entry",
    "convolve",
    "add_constant",
    "minimum",
    "maximum",
    "residual",
    "mixture",
    "Z99",
]

Z99 = 2.3263478740408408  # standard normal 99th percentile (scipy.special.ndtri(0.99))
_FINE_POINTS = 1 << 14
_COARSE_POINTS = 1 << 14
_FAR_TAIL = 1e-9  # probability beyond the coarse grid that we accept losing (reported)


def _arr(x: Any) -> np.ndarray:
    return np.asarray(x, dtype=float)


class Latency:
    """Base class: a non-negative random duration in milliseconds."""

    mean_ms: float
    second_moment_ms2: float
    lost_mass: float = 0.0

    def cdf(self, x_ms: Any) -> np.ndarray:
        raise NotImplementedError

    def sf(self, x_ms: Any) -> np.ndarray:
        return 1.0 - self.cdf(x_ms)

    def quantile(self, q: Any) -> np.ndarray:
        raise NotImplementedError

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return self.quantile(rng.random(size))

    def laplace(self, s_per_ms: float) -> float:
        """E[exp(-s X)], s in 1/ms; numerically by integrating over the quantile function
        (midpoint rule on 4096 probability cells; the integrand lies in [0, 1])."""
        u = (np.arange(4096) + 0.5) / 4096
        return float(np.mean(np.exp(-s_per_ms * self.quantile(u))))

    @property
    def upper_ms(self) -> float:
        """A point beyond which at most 1e-9 of the mass lies (for grid spans)."""
        return float(self.quantile(1.0 - _FAR_TAIL))

    @property
    def is_fixed(self) -> bool:
        return False

    def describe(self) -> str:
        return repr(self)


# --------------------------------------------------------------------------- closed forms
@dataclass(frozen=True)
class Fixed(Latency):
    ms: float

    @property
    def mean_ms(self) -> float:
        return self.ms

    @property
    def second_moment_ms2(self) -> float:
        return self.ms**2

    @property
    def is_fixed(self) -> bool:
        return True

    def cdf(self, x_ms: Any) -> np.ndarray:
        return (_arr(x_ms) >= self.ms).astype(float)

    def quantile(self, q: Any) -> np.ndarray:
        return np.full_like(_arr(q), self.ms)

    def laplace(self, s_per_ms: float) -> float:
        return math.exp(-s_per_ms * self.ms)

    @property
    def upper_ms(self) -> float:
        return self.ms


@dataclass(frozen=True)
class Exponential(Latency):
    mean: float

    @property
    def mean_ms(self) -> float:
        return self.mean

    @property
    def second_moment_ms2(self) -> float:
        return 2 * self.mean**2

    def cdf(self, x_ms: Any) -> np.ndarray:
        return -np.expm1(-np.maximum(_arr(x_ms), 0.0) / self.mean)

    def sf(self, x_ms: Any) -> np.ndarray:
        return np.exp(-np.maximum(_arr(x_ms), 0.0) / self.mean)

    def quantile(self, q: Any) -> np.ndarray:
        return -self.mean * np.log1p(-_arr(q))

    def laplace(self, s_per_ms: float) -> float:
        return 1.0 / (1.0 + s_per_ms * self.mean)


@dataclass(frozen=True)
class Lognormal(Latency):
    """ln X ~ Normal(mu, sigma), X in ms."""

    mu: float
    sigma: float

    @classmethod
    def from_percentiles(cls, p50_ms: float, p99_ms: float) -> Lognormal:
        """Median and 99th percentile fix mu = ln p50 and sigma = ln(p99/p50) / z_0.99."""
        return cls(math.log(p50_ms), math.log(p99_ms / p50_ms) / Z99)

    @property
    def mean_ms(self) -> float:
        return math.exp(self.mu + self.sigma**2 / 2)

    @property
    def second_moment_ms2(self) -> float:
        return math.exp(2 * self.mu + 2 * self.sigma**2)

    def cdf(self, x_ms: Any) -> np.ndarray:
        from scipy.special import ndtr

        x = _arr(x_ms)
        with np.errstate(divide="ignore"):
            z = (np.log(np.maximum(x, 0.0)) - self.mu) / self.sigma
        return ndtr(z)

    def sf(self, x_ms: Any) -> np.ndarray:
        from scipy.special import ndtr

        x = _arr(x_ms)
        with np.errstate(divide="ignore"):
            z = (np.log(np.maximum(x, 0.0)) - self.mu) / self.sigma
        return ndtr(-z)

    def quantile(self, q: Any) -> np.ndarray:
        from scipy.special import ndtri

        return np.exp(self.mu + self.sigma * ndtri(_arr(q)))

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return rng.lognormal(self.mu, self.sigma, size)


@dataclass(frozen=True)
class Gamma(Latency):
    shape: float
    scale_ms: float

    @property
    def mean_ms(self) -> float:
        return self.shape * self.scale_ms

    @property
    def second_moment_ms2(self) -> float:
        return self.shape * (self.shape + 1) * self.scale_ms**2

    def cdf(self, x_ms: Any) -> np.ndarray:
        from scipy.special import gammainc

        return gammainc(self.shape, np.maximum(_arr(x_ms), 0.0) / self.scale_ms)

    def sf(self, x_ms: Any) -> np.ndarray:
        from scipy.special import gammaincc

        return gammaincc(self.shape, np.maximum(_arr(x_ms), 0.0) / self.scale_ms)

    def quantile(self, q: Any) -> np.ndarray:
        from scipy.special import gammaincinv

        return self.scale_ms * gammaincinv(self.shape, _arr(q))

    def laplace(self, s_per_ms: float) -> float:
        return (1.0 + s_per_ms * self.scale_ms) ** (-self.shape)


@dataclass(frozen=True)
class Weibull(Latency):
    shape: float
    scale_ms: float

    @property
    def mean_ms(self) -> float:
        return self.scale_ms * math.gamma(1 + 1 / self.shape)

    @property
    def second_moment_ms2(self) -> float:
        return self.scale_ms**2 * math.gamma(1 + 2 / self.shape)

    def cdf(self, x_ms: Any) -> np.ndarray:
        return -np.expm1(-((np.maximum(_arr(x_ms), 0.0) / self.scale_ms) ** self.shape))

    def sf(self, x_ms: Any) -> np.ndarray:
        return np.exp(-((np.maximum(_arr(x_ms), 0.0) / self.scale_ms) ** self.shape))

    def quantile(self, q: Any) -> np.ndarray:
        return self.scale_ms * (-np.log1p(-_arr(q))) ** (1 / self.shape)


@dataclass(frozen=True)
class Table(Latency):
    """A quantile table, linear between its points (a piecewise-uniform density).

    Beyond the data: below the first point the quantile function runs linearly from 0 ms at
    q = 0 (unless the table starts at q = 0); above the last point, when it is below q = 1, the
    tail is exponential with the log-survival slope of the last segment, so the table's last
    percentile is never taken as a maximum.
    """

    qs: tuple[float, ...]
    xs_ms: tuple[float, ...]
    tail_mean_ms: float = field(init=False)
    _q: np.ndarray = field(init=False, repr=False, compare=False)
    _x: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        q, x = list(self.qs), list(self.xs_ms)
        if q[0] > 0:
            q, x = [0.0, *q], [0.0, *x]
        tail = 0.0
        if q[-1] < 1:
            dq = math.log((1 - q[-2]) / (1 - q[-1]))
            dx = x[-1] - x[-2]
            tail = max(dx / dq, 1e-9 * max(x[-1], 1e-9)) if dq > 0 else max(x[-1], 1e-9) * 0.1
        object.__setattr__(self, "tail_mean_ms", tail)
        object.__setattr__(self, "_q", np.array(q))
        object.__setattr__(self, "_x", np.array(x))

    def quantile(self, q: Any) -> np.ndarray:
        qq = _arr(q)
        body = np.interp(qq, self._q, self._x)
        if self._q[-1] >= 1:
            return body
        qt = self._q[-1]
        with np.errstate(divide="ignore", invalid="ignore"):
            tail = self._x[-1] + self.tail_mean_ms * np.log((1 - qt) / np.maximum(1 - qq, 1e-300))
        return np.where(qq > qt, tail, body)

    def cdf(self, x_ms: Any) -> np.ndarray:
        x = _arr(x_ms)
        body = np.interp(x, self._x, self._q, left=0.0)
        if self._q[-1] >= 1:
            return body
        qt = self._q[-1]
        tail = 1 - (1 - qt) * np.exp(-(x - self._x[-1]) / self.tail_mean_ms)
        return np.where(x > self._x[-1], tail, body)

    @property
    def mean_ms(self) -> float:
        q, x = self._q, self._x
        body = float(np.sum(np.diff(q) * (x[1:] + x[:-1]) / 2))
        return body + (1 - q[-1]) * (x[-1] + self.tail_mean_ms)

    @property
    def second_moment_ms2(self) -> float:
        q, x = self._q, self._x
        a, b = x[:-1], x[1:]
        body = float(np.sum(np.diff(q) * (a * a + a * b + b * b) / 3))
        m, t = x[-1], self.tail_mean_ms
        return body + (1 - q[-1]) * (m * m + 2 * m * t + 2 * t * t)


@dataclass(frozen=True)
class Empirical(Latency):
    """Measured samples; quantiles interpolate between order statistics (no extrapolation:
    the largest sample is the largest value this profile can produce)."""

    values_ms: tuple[float, ...]
    _x: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_x", np.sort(np.asarray(self.values_ms, dtype=float)))

    def __repr__(self) -> str:
        return f"Empirical(n={len(self._x)}, p50={self.quantile(0.5):.4g} ms)"

    def quantile(self, q: Any) -> np.ndarray:
        n = len(self._x)
        return np.interp(_arr(q) * (n - 1), np.arange(n), self._x)

    def cdf(self, x_ms: Any) -> np.ndarray:
        n = len(self._x)
        return np.interp(_arr(x_ms), self._x, np.arange(n) / (n - 1), left=0.0, right=1.0)

    @property
    def mean_ms(self) -> float:
        return float(self._x.mean())

    @property
    def second_moment_ms2(self) -> float:
        return float(np.mean(self._x**2))

    def laplace(self, s_per_ms: float) -> float:
        return float(np.mean(np.exp(-s_per_ms * self._x)))


@dataclass(frozen=True)
class Mixture(Latency):
    """Each draw comes from part i with probability ``weights[i]``."""

    weights: tuple[float, ...]
    parts: tuple[Latency, ...]
    # quantiles already inverted (the object is frozen, so they cannot go stale)
    _quantiles: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    @property
    def mean_ms(self) -> float:
        return sum(w * p.mean_ms for w, p in zip(self.weights, self.parts, strict=True))

    @property
    def second_moment_ms2(self) -> float:
        return sum(w * p.second_moment_ms2 for w, p in zip(self.weights, self.parts, strict=True))

    @property
    def lost_mass(self) -> float:  # type: ignore[override]
        return sum(w * p.lost_mass for w, p in zip(self.weights, self.parts, strict=True))

    def cdf(self, x_ms: Any) -> np.ndarray:
        return sum(w * p.cdf(x_ms) for w, p in zip(self.weights, self.parts, strict=True))

    def sf(self, x_ms: Any) -> np.ndarray:
        return sum(w * p.sf(x_ms) for w, p in zip(self.weights, self.parts, strict=True))

    def laplace(self, s_per_ms: float) -> float:
        return sum(w * p.laplace(s_per_ms) for w, p in zip(self.weights, self.parts, strict=True))

    def quantile(self, q: Any) -> np.ndarray:
        """Numeric inverse of the mixture's cdf (``_invert_cdf``), remembered per probability
        for short requests and per whole array for long ones."""
        qq = _arr(q)
        cache = self._quantiles
        if qq.size > 16:
            key = (qq.shape, qq.tobytes())
            if key not in cache:
                cache[key] = _invert_cdf(self, qq)
            return cache[key].copy()
        flat = qq.ravel().tolist()
        missing = sorted({v for v in flat if v not in cache})
        if missing:
            cache.update(zip(missing, _invert_cdf(self, np.array(missing)).tolist(), strict=True))
        return np.array([cache[v] for v in flat], dtype=float).reshape(qq.shape)

    @property
    def upper_ms(self) -> float:
        return max(p.upper_ms for p in self.parts)

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        which = rng.choice(len(self.parts), size=size, p=np.asarray(self.weights))
        out = np.empty(size)
        for i, part in enumerate(self.parts):
            idx = np.flatnonzero(which == i)
            if idx.size:
                out[idx] = part.sample(rng, idx.size)
        return out


def _invert_cdf(dist: Latency, q: np.ndarray, rtol: float = 1e-10) -> np.ndarray:
    """Numeric quantile: the smallest x (ms) with F(x) >= q, to relative ``rtol``.

    Bracketed on a log grid of 2048 points, then refined by the Illinois variant of regula
    falsi (Dowell and Jarratt, BIT 11, 1971), with a bisection step whenever a step fails to
    halve the bracket, so atoms and flat stretches of F converge as surely as by bisection.
    The bracket keeps F(lo) < q <= F(hi); the upper end is returned.
    """
    top = max(dist.upper_ms, 1e-9) * 4
    grid = np.concatenate([[0.0], np.geomspace(top * 1e-12, top, 2048)])
    c = dist.cdf(grid)
    qf = np.clip(q.ravel(), 0.0, 1.0)
    idx = np.searchsorted(c, qf, side="left")
    out = np.where(idx == 0, 0.0, grid[-1])  # q <= F(0): 0; q beyond the grid: its end
    inside = np.flatnonzero((idx > 0) & (idx < len(grid)))
    if inside.size == 0:
        return out.reshape(q.shape)
    qa = qf[inside]
    lo, hi = grid[idx[inside] - 1], grid[idx[inside]]
    f_lo, f_hi = c[idx[inside] - 1], c[idx[inside]]
    # Illinois weights on the residuals F - q at the two ends (halved on a repeated side)
    w_lo, w_hi = np.ones(len(qa)), np.ones(len(qa))
    moved = np.zeros(len(qa), dtype=np.int8)  # side moved last: -1 lower end, +1 upper end
    ref_width = hi - lo  # width when the last check began: bisect if it has not halved since
    age = np.zeros(len(qa), dtype=np.int8)
    live = np.arange(len(qa))
    for _ in range(200):
        width = hi[live] - lo[live]
        keep = width > rtol * hi[live]
        live, width = live[keep], width[keep]
        if live.size == 0:
            break
        lo_l, hi_l = lo[live], hi[live]
        r_lo = w_lo[live] * (f_lo[live] - qa[live])
        r_hi = w_hi[live] * (f_hi[live] - qa[live])
        with np.errstate(divide="ignore", invalid="ignore"):
            mid = lo_l + width * (r_lo / (r_lo - r_hi))
        # at least half the tolerance inside either end, so that the bracket closes
        tau = np.minimum(0.5 * rtol * hi_l, 0.25 * width)
        mid = np.clip(np.nan_to_num(mid, nan=0.0), lo_l + tau, hi_l - tau)
        check = age[live] >= 3
        # bisect when the bracket has not halved in three steps, or where the two ends' F
        # differ by rounding only (interpolation is noise there)
        slow = (check & (width > 0.5 * ref_width[live])) | (f_hi[live] - f_lo[live] < 1e-13)
        mid = np.where(slow, lo_l + 0.5 * width, mid)
        ref_width[live] = np.where(check, width, ref_width[live])
        age[live] = np.where(check, 0, age[live] + 1)
        f_mid = dist.cdf(mid)
        below = f_mid < qa[live]
        up, dn = live[below], live[~below]
        lo[up], f_lo[up], w_lo[up] = mid[below], f_mid[below], 1.0
        w_hi[up] = np.where(moved[up] == -1, 0.5 * w_hi[up], w_hi[up])
        moved[up] = -1
        hi[dn], f_hi[dn], w_hi[dn] = mid[~below], f_mid[~below], 1.0
        w_lo[dn] = np.where(moved[dn] == 1, 0.5 * w_lo[dn], w_lo[dn])
        moved[dn] = 1
    out[inside] = hi
    return out.reshape(q.shape)


# --------------------------------------------------------------------------- numeric grid
@dataclass(frozen=True)
class GridLatency(Latency):
    """A distribution known by its cdf at increasing points ``x_ms`` (linear in between).

    ``lost_mass`` is the probability beyond the last point, which the grid could not hold.
    """

    x_ms: np.ndarray = field(repr=False)
    cdf_at: np.ndarray = field(repr=False)
    mean: float
    second: float
    lost: float = 0.0
    label: str = "numeric"

    def __repr__(self) -> str:
        return (f"GridLatency({self.label}, mean={self.mean:.4g} ms, points={len(self.x_ms)}, "
                f"lost_mass={self.lost:.1e})")

    @property
    def mean_ms(self) -> float:
        return self.mean

    @property
    def second_moment_ms2(self) -> float:
        return self.second

    @property
    def lost_mass(self) -> float:  # type: ignore[override]
        return self.lost

    def cdf(self, x_ms: Any) -> np.ndarray:
        return np.interp(_arr(x_ms), self.x_ms, self.cdf_at, left=0.0, right=self.cdf_at[-1])

    @cached_property
    def _inverse(self) -> tuple[np.ndarray, np.ndarray]:
        """(cdf, x) with the cdf strictly increasing, for ``quantile`` (built once)."""
        c = np.maximum.accumulate(self.cdf_at)
        # np.interp needs increasing xp; flat stretches of the cdf map to their left end
        keep = np.concatenate([[True], np.diff(c) > 0])
        return c[keep], self.x_ms[keep]

    def quantile(self, q: Any) -> np.ndarray:
        qq = np.clip(_arr(q), 0.0, 1.0)
        c, x = self._inverse
        return np.interp(qq, c, x, left=0.0, right=self.x_ms[-1])

    @property
    def upper_ms(self) -> float:
        return float(self.x_ms[-1])


def from_points(values_ms: Any, weights: Any, label: str = "weighted points",
                size: int = 2049) -> GridLatency:
    """The law of weighted points: each point's mass at the first of ``size`` grid points on
    [0, max] at or above it; the mean and second moment exact."""
    v, w = _arr(values_ms).ravel(), _arr(weights).ravel()
    keep = w > 0
    v, w = v[keep], w[keep] / w[keep].sum()
    hi = max(float(v.max()), 1e-9)
    x = np.linspace(0.0, hi, size)
    at = np.minimum(np.ceil(np.maximum(v, 0.0) / (hi / (size - 1))).astype(int), size - 1)
    cdf = np.clip(np.cumsum(np.bincount(at, weights=w, minlength=size)), 0.0, 1.0)
    return GridLatency(x, cdf, float(w @ v), float(w @ v**2), label=label)


def _span(dists: tuple[Latency, ...]) -> tuple[float, float, float]:
    """Grid scales: fine step, fine span and coarse span (ms) from the operands' quantiles."""
    far = sum(d.upper_ms for d in dists)
    qs = [d.quantile(np.array([0.05, 0.999])) for d in dists]  # one inversion per operand
    body = sum(float(q[1]) for q in qs)
    small = min(max(float(q[0]), 1e-6) for q in qs)
    fine_span = min(max(4 * body, 16 * small), far) or far
    step = min(small / 32, fine_span / _FINE_POINTS)
    fine_span = min(fine_span, step * _FINE_POINTS)
    return step, fine_span, max(far, fine_span) * 1.0001


def _masses(dist: Latency, step: float, n: int) -> np.ndarray:
    """Probability of each bin ((k - 1/2) h, (k + 1/2) h], mass at k h (centred rounding)."""
    if dist.is_fixed:
        out = np.zeros(n)
        k = int(round(dist.mean_ms / step))
        if k < n:
            out[k] = 1.0
        return out
    edges = (np.arange(n) + 0.5) * step
    c = dist.cdf(edges)
    return np.diff(np.concatenate([[0.0], c]))


def _fft_sum(masses: list[np.ndarray], n: int) -> np.ndarray:
    from scipy.fft import irfft, next_fast_len, rfft

    m = next_fast_len(n * len(masses))
    spec = np.ones(m // 2 + 1, dtype=complex)
    for p in masses:
        spec = spec * rfft(p, m)
    return np.clip(irfft(spec, m)[:n], 0.0, None)


def _two_scale(parts_cdf: Any, fine_step: float, fine_span: float, coarse_span: float,
               label: str, mean: float, second: float, masses_fn: Any = None) -> GridLatency:
    """Assemble a GridLatency from cdf values on a fine and a coarse uniform grid."""
    n_f = int(math.ceil(fine_span / fine_step))
    n_c = _COARSE_POINTS
    coarse_step = coarse_span / n_c
    xs_f = (np.arange(n_f) + 0.5) * fine_step
    xs_c = (np.arange(n_c) + 0.5) * coarse_step
    c_f = parts_cdf(xs_f, fine_step, n_f)
    c_c = parts_cdf(xs_c, coarse_step, n_c)
    if coarse_step <= fine_step:
        x, c = xs_f, c_f
    else:
        keep = xs_c > xs_f[-1]
        x = np.concatenate([[0.0], xs_f, xs_c[keep]])
        c = np.concatenate([[0.0], c_f, c_c[keep]])
    c = np.clip(np.maximum.accumulate(c), 0.0, 1.0)
    lost = float(max(0.0, 1.0 - c[-1]))
    return GridLatency(x, c, mean, second, lost, label)


def convolve(*dists: Latency) -> Latency:
    """The sum of independent latencies (FFT convolution on a two-scale grid).

    Mean and second moment are exact (sums of moments of independent variables).
    """
    fixed = sum(d.mean_ms for d in dists if d.is_fixed)
    rest = tuple(d for d in dists if not d.is_fixed)
    if not rest:
        return Fixed(fixed)
    if len(rest) == 1:
        base = rest[0]
    else:
        step, fine_span, coarse_span = _span(rest)

        def cdf_on(xs: np.ndarray, h: float, n: int) -> np.ndarray:
            return np.cumsum(_fft_sum([_masses(d, h, n) for d in rest], n))

        mean = sum(d.mean_ms for d in rest)
        var = sum(d.second_moment_ms2 - d.mean_ms**2 for d in rest)
        base = _two_scale(cdf_on, step, fine_span, coarse_span, "sum", mean, var + mean**2)
    return add_constant(base, fixed) if fixed else base


def convolve_power(dist: Latency, n: int) -> Latency:
    """The sum of ``n`` independent copies of ``dist`` (one FFT, raised to the n-th power)."""
    if n == 0:
        return Fixed(0.0)
    if n == 1 or dist.is_fixed:
        return Fixed(dist.mean_ms * n) if dist.is_fixed else dist
    step, fine_span, coarse_span = _span((dist,) * n)

    def cdf_on(xs: np.ndarray, h: float, k: int) -> np.ndarray:
        from scipy.fft import irfft, next_fast_len, rfft

        m = next_fast_len(k * 2)
        spec = rfft(_masses(dist, h, k), m) ** n
        return np.cumsum(np.clip(irfft(spec, m)[:k], 0.0, None))

    var = dist.second_moment_ms2 - dist.mean_ms**2
    mean = n * dist.mean_ms
    return _two_scale(cdf_on, step, fine_span, coarse_span, f"sum of {n}", mean,
                      n * var + mean**2)


@dataclass(frozen=True)
class Shifted(Latency):
    """``base`` plus a constant ``shift_ms``."""

    base: Latency
    shift_ms: float

    @property
    def mean_ms(self) -> float:
        return self.base.mean_ms + self.shift_ms

    @property
    def second_moment_ms2(self) -> float:
        b = self.base
        return b.second_moment_ms2 + 2 * self.shift_ms * b.mean_ms + self.shift_ms**2

    @property
    def lost_mass(self) -> float:  # type: ignore[override]
        return self.base.lost_mass

    def cdf(self, x_ms: Any) -> np.ndarray:
        return self.base.cdf(_arr(x_ms) - self.shift_ms)

    def sf(self, x_ms: Any) -> np.ndarray:
        return self.base.sf(_arr(x_ms) - self.shift_ms)

    def quantile(self, q: Any) -> np.ndarray:
        return self.base.quantile(q) + self.shift_ms

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        return self.base.sample(rng, size) + self.shift_ms

    def laplace(self, s_per_ms: float) -> float:
        return math.exp(-s_per_ms * self.shift_ms) * self.base.laplace(s_per_ms)

    @property
    def upper_ms(self) -> float:
        return self.base.upper_ms + self.shift_ms


def add_constant(dist: Latency, shift_ms: float) -> Latency:
    """``dist`` delayed by a constant (exact)."""
    if shift_ms == 0:
        return dist
    if dist.is_fixed:
        return Fixed(dist.mean_ms + shift_ms)
    return Shifted(dist, shift_ms)


def _pointwise(dists: tuple[Latency, ...], combine: Any, label: str) -> GridLatency:
    step, fine_span, coarse_span = _span(dists)
    fine_span = min(fine_span, max(float(d.quantile(0.999)) for d in dists) * 4)
    step = min(step, fine_span / _FINE_POINTS)

    def cdf_on(xs: np.ndarray, h: float, n: int) -> np.ndarray:
        return combine(*(d.cdf(xs) for d in dists))

    g = _two_scale(cdf_on, step, fine_span, coarse_span, label, 0.0, 0.0)
    mean, second = _moments_from_cdf(g.x_ms, g.cdf_at)
    return GridLatency(g.x_ms, g.cdf_at, mean, second, g.lost, label)


def _moments_from_cdf(x: np.ndarray, c: np.ndarray) -> tuple[float, float]:
    """E[X] = ∫ sf, E[X²] = ∫ 2 x sf, by the trapezoid rule on the grid."""
    sf = 1.0 - c
    mean = float(np.sum(np.diff(x) * (sf[1:] + sf[:-1]) / 2))
    g = 2 * x * sf
    second = float(np.sum(np.diff(x) * (g[1:] + g[:-1]) / 2))
    return mean, second


def minimum(a: Latency, b: Latency, shared_share: float = 0.0) -> GridLatency:
    """The first of two latencies to finish.

    With probability ``shared_share`` the two are driven by one cause (comonotone: the same
    quantile in both), otherwise independent: sf = (1-s) sf_a sf_b + s min(sf_a, sf_b).
    Independent case: Ross, Introduction to Probability Models, ch. 5 (order statistics).
    """
    s = shared_share

    def comb(ca: np.ndarray, cb: np.ndarray) -> np.ndarray:
        sa, sb = 1 - ca, 1 - cb
        return 1 - ((1 - s) * sa * sb + s * np.minimum(sa, sb))

    return _pointwise((a, b), comb, "first of two")


def maximum(a: Latency, b: Latency, shared_share: float = 0.0) -> GridLatency:
    """The later of two latencies: cdf = (1-s) F_a F_b + s min(F_a, F_b)."""
    s = shared_share

    def comb(ca: np.ndarray, cb: np.ndarray) -> np.ndarray:
        return (1 - s) * ca * cb + s * np.minimum(ca, cb)

    return _pointwise((a, b), comb, "later of two")


def residual(dist: Latency) -> Latency:
    """The equilibrium residual of ``dist``: density sf(t) / E[S] (the remaining time of a
    flush found in progress at a random instant; Kleinrock, Queueing Systems vol. 1, 1975,
    section 5.2). Its mean is E[S²] / (2 E[S])."""
    if dist.is_fixed:
        return Uniform0(dist.mean_ms)
    step, fine_span, coarse_span = _span((dist,))
    # the residual's tail is heavier than the flush's own: span out to a far quantile
    coarse_span = max(coarse_span, float(dist.quantile(1 - 1e-13)) * 1.0001)
    m = dist.mean_ms

    n_f = int(math.ceil(fine_span / step))
    xs_f = (np.arange(n_f) + 0.5) * step
    xs_c = (np.arange(_COARSE_POINTS) + 0.5) * (coarse_span / _COARSE_POINTS)
    pts = np.concatenate([[0.0], xs_f, xs_c[xs_c > xs_f[-1]]])
    sf = dist.sf(pts)
    # the integral of sf from 0 to each point (trapezoid rule on the merged grid)
    c = np.concatenate([[0.0], np.cumsum(np.diff(pts) * (sf[1:] + sf[:-1]) / 2)]) / m
    c = np.clip(c, 0.0, 1.0)
    mean = dist.second_moment_ms2 / (2 * m)
    _, second = _moments_from_cdf(pts, c)
    return GridLatency(pts, c, mean, second, float(max(0.0, 1.0 - c[-1])), "residual")


@dataclass(frozen=True)
class Uniform0(Latency):
    """Uniform on [0, width_ms] (the residual of a fixed flush)."""

    width_ms: float

    @property
    def mean_ms(self) -> float:
        return self.width_ms / 2

    @property
    def second_moment_ms2(self) -> float:
        return self.width_ms**2 / 3

    def cdf(self, x_ms: Any) -> np.ndarray:
        return np.clip(_arr(x_ms) / self.width_ms, 0.0, 1.0)

    def quantile(self, q: Any) -> np.ndarray:
        return _arr(q) * self.width_ms

    def laplace(self, s_per_ms: float) -> float:
        x = s_per_ms * self.width_ms
        return 1.0 if x == 0 else -math.expm1(-x) / x


def mixture(weights: Any, parts: Any) -> Latency:
    """A mixture, dropping parts of zero weight (weights are renormalised only for rounding)."""
    pairs = [(float(w), p) for w, p in zip(weights, parts, strict=True) if w > 0]
    if len(pairs) == 1:
        return pairs[0][1]
    total = sum(w for w, _ in pairs)
    return Mixture(tuple(w / total for w, _ in pairs), tuple(p for _, p in pairs))


# --------------------------------------------------------------------------- case entries
def from_entry(entry: Any) -> Latency:
    """Build a profile from a validated case-file profile entry (see commitadvisor.case)."""
    kind = entry.kind
    if kind == "lognormal":
        if entry.sigma is not None:
            return Lognormal(math.log(entry.p50_ms), entry.sigma)
        return Lognormal.from_percentiles(entry.p50_ms, entry.p99_ms)
    if kind == "fixed":
        return Fixed(entry.ms)
    if kind == "exponential":
        return Exponential(entry.mean_ms)
    if kind == "gamma":
        return Gamma(entry.shape, entry.scale_ms)
    if kind == "weibull":
        return Weibull(entry.shape, entry.scale_ms)
    if kind == "table":
        return Table(tuple(entry.quantiles), tuple(entry.ms))
    if kind == "samples":
        return Empirical(entry.values_ms)
    if kind == "mixture":
        return mixture([p.share for p in entry.parts], [from_entry(p.profile) for p in entry.parts])
    raise ValueError(f"unknown profile kind {kind!r}")

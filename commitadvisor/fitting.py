"""Fit flush-latency profiles to measurements: samples or a cumulative histogram.

Four families are fitted by maximum likelihood with the location fixed at 0: lognormal,
gamma, Weibull, and a two-part mixture of lognormals (a fast body plus a share of slow
outliers). They are compared by the Kolmogorov–Smirnov statistic, the log-likelihood and
AIC = 2k − 2 ln L (Akaike, IEEE Trans. Automatic Control 19(6), 1974); the family with the
lowest AIC is chosen. ``profile_entry_toml`` prints a fit as a ready-to-paste entry in the
project's profile format.

Pure model code: no file I/O, no printing. scipy is imported inside the functions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from decimal import Decimal

import numpy as np

__all__ = [
    "FamilyFit",
    "FitReport",
    "MixturePart",
    "MIN_SAMPLES",
    "SIGMA_RATIO_MIN",
    "fit_cumulative_histogram",
    "fit_samples",
    "profile_entry_toml",
]

MIN_SAMPLES = 20
"""Fewest observations accepted: below this no tail percentile means anything."""

FAMILIES = ("lognormal", "gamma", "weibull", "mixture")
N_PARAMETERS = {"lognormal": 2, "gamma": 2, "weibull": 2, "mixture": 5}

_QUANTILES = (0.5, 0.99, 0.999)
_MIN_COMPONENT_COUNT = 5.0  # a mixture part must carry at least this many observations
# The mixture's two sigmas (of ln x) are kept within this ratio of each other. Without such
# a bound the likelihood of a normal mixture with unequal variances is unbounded and full
# of spurious maxima (a narrow part on a handful of close values); a lower bound on the
# ratio of the variances restores a proper maximum (Hathaway, Annals of Statistics 13(2),
# 1985). In our trials on 60 pure lognormal samples (n = 500) the bound 0.2 cut the runs
# where the mixture won on AIC from 15 to 10, near what AIC's 3 extra parameters allow by
# chance (a likelihood-ratio statistic above 6: about 11 % for chi-squared with 3 degrees
# of freedom); a real cluster of equal-length stalls keeps its share and median, with its
# width raised to a fifth of the body's (a slightly longer, cautious tail).
SIGMA_RATIO_MIN = 0.2
_LOG_TINY = -690.0  # ln of the smallest probability we let a bucket have (about 1e-300)

SELECTION_NOTE = (
    "the family with the lowest AIC = 2k - 2 ln L (Akaike 1974) is chosen; k is the number "
    "of fitted parameters: 2 for lognormal, gamma and Weibull, 5 for the mixture"
)


@dataclass(frozen=True)
class MixturePart:
    """One lognormal part of a mixture: its share of flushes, median (ms) and sigma of ln."""

    share: float
    median_ms: float
    sigma: float

    @property
    def p99_ms(self) -> float:
        """99th percentile of this part alone, in ms."""
        return self.median_ms * math.exp(self.sigma * _z99())


@dataclass(frozen=True)
class FamilyFit:
    """One fitted family: parameters, goodness of fit, and the fitted distribution's figures.

    ``parameters`` holds (name, value) pairs: lognormal ``median_ms``, ``sigma`` (of ln);
    gamma and Weibull ``shape``, ``scale_ms``; mixture ``outlier_share``, ``body_median_ms``,
    ``body_sigma``, ``outlier_median_ms``, ``outlier_sigma``. ``log_likelihood`` is in
    natural log units (densities in 1/ms for samples; bucket probabilities for histograms).
    """

    family: str
    parameters: tuple[tuple[str, float], ...]
    n_parameters: int
    log_likelihood: float
    aic: float
    ks_statistic: float
    p50_ms: float
    p99_ms: float
    p999_ms: float
    mean_ms: float
    outlier_share: float | None = None
    parts: tuple[MixturePart, ...] = ()

    def parameter(self, name: str) -> float:
        """The value of the named parameter (KeyError when the family has no such one)."""
        for key, value in self.parameters:
            if key == name:
                return value
        raise KeyError(f"{self.family} fit has no parameter {name!r}")


@dataclass(frozen=True)
class FitReport:
    """All fits of one data set, the data's own figures, and the family chosen by AIC.

    Data figures (ms) are ``None`` where the data cannot give them (a histogram percentile
    or mean that falls in an open last bucket).
    """

    source: str  # "samples" or "cumulative histogram"
    n_observations: int
    data_p50_ms: float | None
    data_p99_ms: float | None
    data_p999_ms: float | None
    data_mean_ms: float | None
    data_quantile_method: str
    ks_method: str
    fits: tuple[FamilyFit, ...]
    best_family: str
    selection_note: str
    omitted: tuple[tuple[str, str], ...] = ()  # (family, why it was not fitted)
    notes: tuple[str, ...] = ()

    @property
    def best(self) -> FamilyFit:
        """The fit chosen by the lowest AIC."""
        return self.fit(self.best_family)

    def fit(self, family: str) -> FamilyFit:
        """The fit of the named family (KeyError if it was not fitted)."""
        for f in self.fits:
            if f.family == family:
                return f
        raise KeyError(f"no {family} fit in this report")


# --------------------------------------------------------------------------- helpers


def _z99() -> float:
    from scipy import stats

    return float(stats.norm.ppf(0.99))


def _weighted_mean(v: np.ndarray, w: np.ndarray) -> float:
    return float(np.sum(w * v) / np.sum(w))


def _mle_lognormal(x: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """(mu, sigma) of ln x: the closed-form maximum-likelihood estimates (ddof = 0)."""
    y = np.log(x)
    mu = _weighted_mean(y, w)
    sigma = math.sqrt(_weighted_mean((y - mu) ** 2, w))
    return mu, sigma


def _mle_gamma(x: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """(shape k, scale_ms) solving ln k − ψ(k) = ln mean(x) − mean(ln x).

    The likelihood equation of the gamma law with location 0 (Choi and Wette,
    Technometrics 11(4), 1969); the starting value is Minka's approximation
    (Estimating a Gamma distribution, 2002).
    """
    from scipy import optimize, special

    mean_x = _weighted_mean(x, w)
    s = math.log(mean_x) - _weighted_mean(np.log(x), w)
    s = max(s, 1e-12)
    k0 = (3.0 - s + math.sqrt((s - 3.0) ** 2 + 24.0 * s)) / (12.0 * s)

    def g(k: float) -> float:
        return math.log(k) - float(special.digamma(k)) - s

    lo, hi = k0 / 2.0, k0 * 2.0
    while g(lo) < 0.0:
        lo /= 2.0
    while g(hi) > 0.0:
        hi *= 2.0
    k = float(optimize.brentq(g, lo, hi, xtol=1e-14, rtol=1e-14))
    return k, mean_x / k


def _mle_weibull(x: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """(shape k, scale_ms) from the Weibull likelihood equations with location 0.

    k solves Σ x^k ln x / Σ x^k − 1/k − mean(ln x) = 0 and scale = mean(x^k)^(1/k)
    (Cohen, Technometrics 7(4), 1965). Computed on ln x centred at its mean, with
    log-sum-exp, so that large k does not overflow.
    """
    from scipy import optimize, special

    c = _weighted_mean(np.log(x), w)
    y = np.log(x) - c

    def h(k: float) -> float:
        a = k * y
        e = w * np.exp(a - a.max())
        return float(np.sum(e * y) / np.sum(e)) - 1.0 / k

    lo, hi = 0.5, 2.0
    while h(lo) > 0.0:
        lo /= 2.0
    while h(hi) < 0.0:
        hi *= 2.0
    k = float(optimize.brentq(h, lo, hi, xtol=1e-14, rtol=1e-14))
    log_scale = c + (float(special.logsumexp(k * y, b=w)) - math.log(float(np.sum(w)))) / k
    return k, math.exp(log_scale)


def _ks_samples(sorted_x: np.ndarray, cdf_values: np.ndarray) -> float:
    """One-sample Kolmogorov–Smirnov statistic sup |F_n − F| from the sorted data's cdf."""
    n = sorted_x.size
    i = np.arange(1, n + 1)
    return float(max(np.max(i / n - cdf_values), np.max(cdf_values - (i - 1) / n)))


# The four families as plain functions of (parameters, x). Parameters are the natural ones:
# lognormal (mu, sigma), gamma (k, scale), weibull (k, scale), mixture (p_out, mu1, s1, mu2, s2).


def _safe_log(x: np.ndarray) -> np.ndarray:
    """ln x with ln 0 = -inf, without a warning."""
    out = np.full(x.shape, -np.inf)
    pos = x > 0
    out[pos] = np.log(x[pos])
    return out


def _cdf_sf(
    family: str, theta: tuple[float, ...], x: np.ndarray, log_x: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """cdf and survival function at x >= 0 (x may hold 0 and inf), computed without warnings.

    ``log_x`` (ln x, precomputed) saves the logarithm in the lognormal families.
    """
    from scipy import special

    x = np.asarray(x, dtype=float)
    if family == "lognormal":
        mu, s = theta
        z = ((_safe_log(x) if log_x is None else log_x) - mu) / s
        return special.ndtr(z), special.ndtr(-z)
    if family == "gamma":
        k, scale = theta
        u = x / scale
        return special.gammainc(k, u), special.gammaincc(k, u)
    if family == "weibull":
        k, scale = theta
        with np.errstate(over="ignore"):
            u = (x / scale) ** k
        return -np.expm1(-u), np.exp(-u)
    if family == "mixture":
        p, mu1, s1, mu2, s2 = theta
        if log_x is None:
            log_x = _safe_log(x)
        c1, f1 = _cdf_sf("lognormal", (mu1, s1), x, log_x)
        c2, f2 = _cdf_sf("lognormal", (mu2, s2), x, log_x)
        return (1 - p) * c1 + p * c2, (1 - p) * f1 + p * f2
    raise ValueError(f"unknown family {family!r}")


def _logpdf(family: str, theta: tuple[float, ...], x: np.ndarray) -> np.ndarray:
    """Log density (1/ms) at x > 0."""
    from scipy import special, stats

    if family == "lognormal":
        mu, s = theta
        return stats.lognorm.logpdf(x, s, scale=math.exp(mu))
    if family == "gamma":
        k, scale = theta
        return stats.gamma.logpdf(x, k, scale=scale)
    if family == "weibull":
        k, scale = theta
        return stats.weibull_min.logpdf(x, k, scale=scale)
    if family == "mixture":
        p, mu1, s1, mu2, s2 = theta
        l1 = math.log1p(-p) + stats.lognorm.logpdf(x, s1, scale=math.exp(mu1))
        l2 = math.log(p) + stats.lognorm.logpdf(x, s2, scale=math.exp(mu2))
        return special.logsumexp(np.stack([l1, l2]), axis=0)
    raise ValueError(f"unknown family {family!r}")


def _quantile(family: str, theta: tuple[float, ...], q: float) -> float:
    """The q-quantile in ms of the fitted distribution."""
    from scipy import optimize, stats

    if family == "lognormal":
        mu, s = theta
        return math.exp(mu + s * float(stats.norm.ppf(q)))
    if family == "gamma":
        k, scale = theta
        return float(stats.gamma.ppf(q, k, scale=scale))
    if family == "weibull":
        k, scale = theta
        return scale * (-math.log1p(-q)) ** (1.0 / k)
    if family == "mixture":
        p, mu1, s1, mu2, s2 = theta
        # The mixture's quantile lies between its parts' quantiles.
        a = _quantile("lognormal", (mu1, s1), q)
        b = _quantile("lognormal", (mu2, s2), q)
        lo, hi = min(a, b), max(a, b)
        if hi - lo <= 1e-15 * hi:
            return lo

        def f(t: float) -> float:
            c, sf = _cdf_sf("mixture", theta, np.array([t]))
            return float(c[0] - q) if q < 0.5 else float((1 - q) - sf[0])

        return float(optimize.brentq(f, lo, hi, xtol=1e-15, rtol=1e-13))
    raise ValueError(f"unknown family {family!r}")


def _mean(family: str, theta: tuple[float, ...]) -> float:
    """Mean in ms of the fitted distribution (closed forms)."""
    if family == "lognormal":
        mu, s = theta
        return math.exp(mu + s * s / 2)
    if family == "gamma":
        k, scale = theta
        return k * scale
    if family == "weibull":
        k, scale = theta
        return scale * math.gamma(1.0 + 1.0 / k)
    if family == "mixture":
        p, mu1, s1, mu2, s2 = theta
        return (1 - p) * math.exp(mu1 + s1 * s1 / 2) + p * math.exp(mu2 + s2 * s2 / 2)
    raise ValueError(f"unknown family {family!r}")


def _named_parameters(family: str, theta: tuple[float, ...]) -> tuple[tuple[str, float], ...]:
    if family == "lognormal":
        return (("median_ms", math.exp(theta[0])), ("sigma", theta[1]))
    if family in ("gamma", "weibull"):
        return (("shape", theta[0]), ("scale_ms", theta[1]))
    p, mu1, s1, mu2, s2 = theta
    return (
        ("outlier_share", p),
        ("body_median_ms", math.exp(mu1)),
        ("body_sigma", s1),
        ("outlier_median_ms", math.exp(mu2)),
        ("outlier_sigma", s2),
    )


def _make_fit(family: str, theta: tuple[float, ...], log_lik: float, ks: float) -> FamilyFit:
    k = N_PARAMETERS[family]
    q50, q99, q999 = (_quantile(family, theta, q) for q in _QUANTILES)
    parts: tuple[MixturePart, ...] = ()
    outlier: float | None = None
    if family == "mixture":
        p, mu1, s1, mu2, s2 = theta
        outlier = p
        parts = (
            MixturePart(share=1.0 - p, median_ms=math.exp(mu1), sigma=s1),
            MixturePart(share=p, median_ms=math.exp(mu2), sigma=s2),
        )
    return FamilyFit(
        family=family,
        parameters=_named_parameters(family, theta),
        n_parameters=k,
        log_likelihood=float(log_lik),
        aic=2.0 * k - 2.0 * float(log_lik),
        ks_statistic=float(ks),
        p50_ms=q50,
        p99_ms=q99,
        p999_ms=q999,
        mean_ms=_mean(family, theta),
        outlier_share=outlier,
        parts=parts,
    )


def _order_mixture(theta: tuple[float, ...]) -> tuple[float, ...]:
    """Label the part with the lower median as the body, the other as the outliers."""
    p, mu1, s1, mu2, s2 = theta
    if mu2 < mu1:
        return (1.0 - p, mu2, s2, mu1, s1)
    return theta


# --------------------------------------------------------------------------- mixture by EM


def _em_two_normals(
    y: np.ndarray,
    w: np.ndarray,
    init: tuple[float, float, float, float, float],
    sigma_floor: float,
    max_iter: int = 1000,
    rel_tol: float = 1e-11,
) -> tuple[tuple[float, float, float, float, float], float]:
    """Expectation–maximisation for a two-part normal mixture of y = ln x with weights w.

    Dempster, Laird and Rubin, J. Royal Statistical Society B 39(1), 1977. Returns the
    parameters (p of part 2, mu1, s1, mu2, s2) and the weighted log-likelihood of y.
    The sigmas are kept at or above ``sigma_floor`` so that a part cannot collapse onto
    one repeated value, and the smaller at or above SIGMA_RATIO_MIN times the larger (the
    constraint of Hathaway 1985, applied here by raising the smaller after each M-step, so
    the result is close to, not exactly, the constrained maximum).
    """
    p, m1, s1, m2, s2 = init
    half_log_2pi = 0.5 * math.log(2.0 * math.pi)
    total_w = float(np.sum(w))
    prev = -math.inf
    ll = -math.inf
    for _ in range(max_iter):
        l1 = math.log1p(-p) - 0.5 * ((y - m1) / s1) ** 2 - math.log(s1) - half_log_2pi
        l2 = math.log(p) - 0.5 * ((y - m2) / s2) ** 2 - math.log(s2) - half_log_2pi
        lse = np.logaddexp(l1, l2)
        ll = float(np.sum(w * lse))
        r2 = w * np.exp(l2 - lse)
        r1 = w - r2
        n2 = float(np.sum(r2))
        n1 = total_w - n2
        if n1 <= 0.0 or n2 <= 0.0:
            break
        p = n2 / total_w
        m1 = float(np.sum(r1 * y) / n1)
        m2 = float(np.sum(r2 * y) / n2)
        s1 = max(math.sqrt(float(np.sum(r1 * (y - m1) ** 2)) / n1), sigma_floor)
        s2 = max(math.sqrt(float(np.sum(r2 * (y - m2) ** 2)) / n2), sigma_floor)
        s1, s2 = max(s1, SIGMA_RATIO_MIN * s2), max(s2, SIGMA_RATIO_MIN * s1)
        p = min(max(p, 1e-12), 1.0 - 1e-12)
        if ll - prev <= rel_tol * abs(ll):
            break
        prev = ll
    return (p, m1, s1, m2, s2), ll


def _em_starts(y_sorted: np.ndarray, w_sorted: np.ndarray, sigma_floor: float):
    """Starting points: split the data at several tail fractions (slow part = the tail)."""
    cum = np.cumsum(w_sorted)
    total = cum[-1]
    for tail in (0.002, 0.005, 0.01, 0.03, 0.1, 0.3, 0.5):
        cut = int(np.searchsorted(cum, total * (1.0 - tail)))
        lo_y, lo_w = y_sorted[: cut + 1], w_sorted[: cut + 1]
        hi_y, hi_w = y_sorted[cut + 1 :], w_sorted[cut + 1 :]
        if lo_w.sum() < 2 or hi_w.sum() < 2:
            continue
        m1, m2 = _weighted_mean(lo_y, lo_w), _weighted_mean(hi_y, hi_w)
        s1 = max(math.sqrt(_weighted_mean((lo_y - m1) ** 2, lo_w)), sigma_floor)
        s2 = max(math.sqrt(_weighted_mean((hi_y - m2) ** 2, hi_w)), sigma_floor)
        s1, s2 = max(s1, SIGMA_RATIO_MIN * s2), max(s2, SIGMA_RATIO_MIN * s1)
        yield (float(hi_w.sum() / total), m1, s1, m2, s2)


def _fit_mixture_em(
    y: np.ndarray, w: np.ndarray, sigma_floor: float
) -> tuple[tuple[float, ...], float] | None:
    """Best EM solution over several starts; None when every start degenerates.

    "Short runs then long run" (Biernacki, Celeux and Govaert, Computational Statistics &
    Data Analysis 41, 2003): every start runs 20 iterations, the best one runs on for at
    most 300 more (enough, in our checks, to bring the log-likelihood within 0.01 of its
    limit: far below the AIC differences that choose a family).
    """
    order = np.argsort(y, kind="stable")
    ys, ws = y[order], w[order]
    total = float(np.sum(w))

    def usable(theta: tuple[float, ...]) -> bool:
        return min(theta[0], 1.0 - theta[0]) * total >= _MIN_COMPONENT_COUNT

    short = [
        _em_two_normals(ys, ws, start, sigma_floor, max_iter=20)
        for start in _em_starts(ys, ws, sigma_floor)
    ]
    short = sorted((r for r in short if usable(r[0])), key=lambda r: -r[1])
    for theta0, _ in short:
        theta, ll = _em_two_normals(ys, ws, theta0, sigma_floor, max_iter=300, rel_tol=1e-10)
        if usable(theta):
            return theta, ll
    return None


def _selection_notes(fits: list[FamilyFit]) -> list[str]:
    """A note when the runner-up is within 2 of the lowest AIC.

    Rule of thumb of Burnham and Anderson, Model Selection and Multimodel Inference, 2nd ed.
    2002 (from memory): models within 2 of the best have substantial support.
    """
    ranked = sorted(fits, key=lambda f: f.aic)
    if len(ranked) < 2 or ranked[1].aic - ranked[0].aic >= 2.0:
        return []
    return [
        f"{ranked[1].family} is within {ranked[1].aic - ranked[0].aic:.1f} of "
        f"{ranked[0].family} on AIC: the data do not clearly prefer one (a difference "
        "below 2 is weak evidence)"
    ]


def _mixture_notes(theta: tuple[float, ...] | None) -> list[str]:
    if theta is not None and theta[0] > 0.5:
        return [
            f"the mixture's slower part holds {theta[0]:.1%} of the observations: the data "
            "have two modes rather than a fast body with rare outliers"
        ]
    return []


# --------------------------------------------------------------------------- samples


def _check_samples(samples_ms: np.ndarray) -> np.ndarray:
    x = np.asarray(samples_ms, dtype=float)
    if x.ndim != 1:
        raise ValueError(f"samples must be a one-dimensional array, got shape {x.shape}")
    if x.size < MIN_SAMPLES:
        raise ValueError(
            f"need at least {MIN_SAMPLES} samples to fit a latency profile, got {x.size}"
        )
    bad = ~np.isfinite(x)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(
            f"samples must be finite: {int(bad.sum())} value(s) are not "
            f"(first at index {i}: {x[i]!r})"
        )
    nonpos = x <= 0
    if nonpos.any():
        i = int(np.flatnonzero(nonpos)[0])
        raise ValueError(
            f"latency samples must be positive: {int(nonpos.sum())} value(s) are zero or "
            f"negative (first at index {i}: {x[i]!r})"
        )
    if np.all(x == x[0]):
        raise ValueError(
            f"all {x.size} samples are equal ({x[0]!r} ms): no spread to fit a distribution to"
        )
    return x


def fit_samples(samples_ms: np.ndarray) -> FitReport:
    """Fit lognormal, gamma, Weibull and a two-lognormal mixture to latency samples (ms).

    Maximum likelihood with the location fixed at 0: lognormal by its closed form, gamma by
    the Choi–Wette likelihood equation, Weibull by Cohen's (1965) equations, the mixture by
    EM on ln x (Dempster, Laird and Rubin 1977) from several starts. Each fit reports the
    log-likelihood (densities in 1/ms), AIC = 2k − 2 ln L (Akaike 1974), the one-sample
    Kolmogorov–Smirnov statistic, and its p50, p99, p99.9 and mean in ms. The data's
    percentiles are numpy's default linear interpolation between order statistics
    (Hyndman and Fan 1996, definition 7). The family with the lowest AIC is chosen.

    Raises ValueError for fewer than MIN_SAMPLES samples, non-finite or non-positive values.
    """
    x = _check_samples(samples_ms)
    xs = np.sort(x)
    w = np.ones_like(xs)
    n = xs.size

    thetas: dict[str, tuple[float, ...]] = {
        "lognormal": _mle_lognormal(xs, w),
        "gamma": _mle_gamma(xs, w),
        "weibull": _mle_weibull(xs, w),
    }
    omitted: list[tuple[str, str]] = []
    notes: list[str] = []
    y = np.log(xs)
    sigma_floor = max(1e-3, 0.02 * float(np.std(y)))
    em = _fit_mixture_em(y, w, sigma_floor)
    if em is None:
        omitted.append(
            (
                "mixture",
                f"every start gave a part with fewer than {_MIN_COMPONENT_COUNT:g} samples",
            )
        )
    else:
        thetas["mixture"] = _order_mixture(em[0])
        if min(em[0][2], em[0][4]) <= sigma_floor * (1 + 1e-12):
            notes.append(
                f"a mixture part's sigma sits at its floor ({sigma_floor:.4g}); the data "
                "hold a cluster of (nearly) repeated values"
            )

    fits = []
    for family in FAMILIES:
        if family not in thetas:
            continue
        theta = thetas[family]
        log_lik = float(np.sum(_logpdf(family, theta, xs)))
        cdf, _ = _cdf_sf(family, theta, xs)
        fits.append(_make_fit(family, theta, log_lik, _ks_samples(xs, cdf)))

    notes.extend(_mixture_notes(thetas.get("mixture")))
    notes.extend(_selection_notes(fits))
    q = np.quantile(xs, _QUANTILES)
    best = min(fits, key=lambda f: f.aic)
    if n < 1000:
        notes.append(
            f"with {n} samples the data's p99.9 is interpolated among the largest few values "
            "and is not a reliable tail figure"
        )
    return FitReport(
        source="samples",
        n_observations=int(n),
        data_p50_ms=float(q[0]),
        data_p99_ms=float(q[1]),
        data_p999_ms=float(q[2]),
        data_mean_ms=float(np.mean(xs)),
        data_quantile_method=(
            "data percentiles by linear interpolation between order statistics "
            "(Hyndman and Fan 1996, definition 7)"
        ),
        ks_method="one-sample Kolmogorov-Smirnov statistic over all samples",
        fits=tuple(fits),
        best_family=best.family,
        selection_note=SELECTION_NOTE,
        omitted=tuple(omitted),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- histograms


def _check_histogram(
    upper_bounds_ms, cumulative_counts
) -> tuple[np.ndarray, np.ndarray, list[str]]:
    b = np.asarray(upper_bounds_ms, dtype=float)
    c = np.asarray(cumulative_counts, dtype=float)
    notes: list[str] = []
    if b.ndim != 1 or c.ndim != 1 or b.size != c.size:
        raise ValueError(
            "upper bounds and cumulative counts must be one-dimensional and of equal length "
            f"(got {b.shape} and {c.shape})"
        )
    if b.size == 0:
        raise ValueError("the histogram has no buckets")
    if np.isnan(b).any() or np.isnan(c).any():
        raise ValueError("the histogram holds NaN values")
    if np.isinf(b[:-1]).any() or b[-1] == -np.inf:
        raise ValueError("only the last bucket's upper bound may be infinite (+inf)")
    if np.isinf(c).any() or (c < 0).any():
        raise ValueError("cumulative counts must be finite and not negative")
    if not np.all(np.abs(c - np.round(c)) <= 1e-9 * np.maximum(1.0, c)):
        raise ValueError("cumulative counts must be whole numbers")
    c = np.round(c)
    if (np.diff(b) <= 0).any():
        i = int(np.flatnonzero(np.diff(b) <= 0)[0])
        raise ValueError(
            f"bucket upper bounds must be strictly ascending: bound {i + 2} ({b[i + 1]!r} ms) "
            f"does not exceed bound {i + 1} ({b[i]!r} ms)"
        )
    if (np.diff(c) < 0).any():
        i = int(np.flatnonzero(np.diff(c) < 0)[0])
        raise ValueError(
            f"cumulative counts must not decrease: count {i + 2} ({c[i + 1]:g}) is below "
            f"count {i + 1} ({c[i]:g})"
        )
    if b[0] <= 0:
        if b[0] == 0 and c[0] == 0:
            b, c = b[1:], c[1:]
            notes.append("dropped the empty bucket with upper bound 0")
        else:
            raise ValueError(
                f"bucket upper bounds must be positive (latencies are positive); the first is "
                f"{b[0]!r} ms and holds {c[0]:g} observations"
            )
    total = float(c[-1]) if c.size else 0.0
    if total < MIN_SAMPLES:
        raise ValueError(
            f"need at least {MIN_SAMPLES} observations to fit a latency profile, the "
            f"histogram holds {total:g}"
        )
    counts = np.diff(np.concatenate([[0.0], c]))
    if int(np.count_nonzero(counts)) < 3:
        raise ValueError(
            "the observations fall into fewer than 3 buckets: a two-parameter distribution "
            "cannot be fitted (a histogram with finer buckets is needed)"
        )
    return b, c, notes


def _interval_log_lik(
    family: str,
    theta: tuple[float, ...],
    edges: np.ndarray,
    n: np.ndarray,
    log_edges: np.ndarray | None = None,
) -> float:
    """Σ n_i ln P(edges_i < X <= edges_(i+1)): the interval-censored log-likelihood."""
    c, sf = _cdf_sf(family, theta, edges, log_edges)
    # Take each difference on the side where it does not cancel.
    prob = np.where(c[1:] < 0.5, c[1:] - c[:-1], sf[:-1] - sf[1:])
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = np.log(prob)
    logp = np.where(np.isfinite(logp), logp, _LOG_TINY)
    return float(np.dot(n, np.maximum(logp, _LOG_TINY)))


def _to_free(family: str, theta: tuple[float, ...]) -> np.ndarray:
    if family == "lognormal":
        return np.array([theta[0], math.log(theta[1])])
    if family in ("gamma", "weibull"):
        return np.log(np.asarray(theta))
    p, mu1, s1, mu2, s2 = theta
    # s2 = s1 * exp(L * tanh(t)) with L = -ln SIGMA_RATIO_MIN keeps the ratio in bounds.
    bound = -math.log(SIGMA_RATIO_MIN)
    t = math.atanh(min(max(math.log(s2 / s1) / bound, -1 + 1e-9), 1 - 1e-9))
    return np.array([math.log(p / (1 - p)), mu1, math.log(s1), mu2, t])


def _from_free(family: str, v: np.ndarray) -> tuple[float, ...]:
    v = np.clip(np.asarray(v, dtype=float), -700.0, 700.0)
    if family == "lognormal":
        return (float(v[0]), math.exp(v[1]))
    if family in ("gamma", "weibull"):
        return (math.exp(v[0]), math.exp(v[1]))
    p = 1.0 / (1.0 + math.exp(-v[0]))
    s1 = math.exp(v[2])
    s2 = s1 * math.exp(-math.log(SIGMA_RATIO_MIN) * math.tanh(v[4]))
    return (p, float(v[1]), s1, float(v[3]), s2)


def _maximise_interval(
    family: str,
    start: tuple[float, ...],
    edges: np.ndarray,
    n: np.ndarray,
    polish: bool = True,
) -> tuple[tuple[float, ...], float]:
    """Maximise the interval-censored likelihood from ``start``.

    Quasi-Newton (BFGS with finite-difference gradients) on unconstrained parameters (logs
    of shapes, scales and a sigma, the logit of the share, a bounded sigma ratio), then a
    Nelder–Mead polish unless ``polish`` is False.
    """
    from scipy import optimize

    total = float(np.sum(n))
    log_edges = _safe_log(edges)

    def neg(v: np.ndarray) -> float:
        theta = _from_free(family, v)
        if family == "mixture":
            p = theta[0]
            if min(p, 1 - p) * total < _MIN_COMPONENT_COUNT / 10 or theta[2] > 50 or theta[4] > 50:
                return 1e300
        with np.errstate(all="ignore"):
            ll = _interval_log_lik(family, theta, edges, n, log_edges)
        return -ll if math.isfinite(ll) else 1e300

    v = _to_free(family, start)
    best = neg(v)
    # gtol in nats per unit of a free parameter: far finer than any AIC difference.
    res = optimize.minimize(neg, v, method="BFGS", options={"maxiter": 300, "gtol": 1e-4})
    if float(res.fun) <= best:
        v, best = np.asarray(res.x), float(res.fun)
    if not polish:
        return _from_free(family, v), -best
    res = optimize.minimize(
        neg,
        v,
        method="Nelder-Mead",
        options={
            "xatol": 1e-8,
            "fatol": 1e-10,
            "maxfev": 300 * v.size,
            "adaptive": v.size > 2,
        },
    )
    if float(res.fun) <= best:
        v, best = np.asarray(res.x), float(res.fun)
    return _from_free(family, v), -best


def _histogram_quantile(
    lower: np.ndarray, upper: np.ndarray, cum: np.ndarray, q: float
) -> float | None:
    """Linear interpolation within the bucket that holds rank q·N; None in an open bucket."""
    total = cum[-1]
    rank = q * total
    i = int(np.searchsorted(cum, rank, side="left"))
    i = min(i, cum.size - 1)
    if not math.isfinite(upper[i]):
        return None
    before = cum[i - 1] if i > 0 else 0.0
    inside = cum[i] - before
    frac = 0.0 if inside <= 0 else (rank - before) / inside
    return float(lower[i] + frac * (upper[i] - lower[i]))


def fit_cumulative_histogram(upper_bounds_ms, cumulative_counts) -> FitReport:
    """Fit the four families to a cumulative latency histogram by interval-censored likelihood.

    ``upper_bounds_ms`` ascend (ms; the last may be +inf), ``cumulative_counts`` are the
    number of observations at or below each bound (non-decreasing whole numbers), as
    monitoring systems export them. Each observation is known only to lie in
    (previous bound, bound], the first bucket starting at 0, so the likelihood is
    Σ n_i ln(F(b_i) − F(b_(i−1))) (interval censoring; Turnbull, J. Royal Statistical
    Society B 38(3), 1976), maximised from the complete-data estimates at the buckets'
    geometric midpoints. The data's percentiles are interpolated linearly within the bucket
    that holds them and the data's mean uses bucket midpoints; either is None when it
    falls in an open last bucket. The KS statistic is taken at the finite bucket bounds
    only, so it is a lower bound on the statistic the raw samples would give. The mixture
    is fitted only with at least 6 non-empty buckets (more than its 5 parameters).

    Raises ValueError for malformed histograms or fewer than MIN_SAMPLES observations.
    """
    b, cum, notes = _check_histogram(upper_bounds_ms, cumulative_counts)
    edges = np.concatenate([[0.0], b])
    lower = edges[:-1]
    counts = np.diff(np.concatenate([[0.0], cum]))
    keep = counts > 0
    lo_k, up_k, n_k = lower[keep], b[keep], counts[keep]
    total = float(cum[-1])

    # Representative points for starting values: geometric midpoints of the buckets.
    rep = np.empty(lo_k.size)
    for j, (a, c) in enumerate(zip(lo_k, up_k, strict=True)):
        if a <= 0:
            rep[j] = c / 2.0
        elif not math.isfinite(c):
            rep[j] = a * 2.0
        else:
            rep[j] = math.sqrt(a * c)

    starts: dict[str, tuple[float, ...]] = {
        "lognormal": _mle_lognormal(rep, n_k),
        "gamma": _mle_gamma(rep, n_k),
        "weibull": _mle_weibull(rep, n_k),
    }
    omitted: list[tuple[str, str]] = []
    thetas: dict[str, tuple[tuple[float, ...], float]] = {}
    for family, start in starts.items():
        thetas[family] = _maximise_interval(family, start, edges, counts)

    n_nonempty = int(lo_k.size)
    if n_nonempty < 6:
        omitted.append(
            ("mixture", f"only {n_nonempty} non-empty buckets; the mixture has 5 parameters")
        )
    else:
        y = np.log(rep)
        closed = np.isfinite(up_k) & (lo_k > 0)
        widths = np.log(up_k[closed] / lo_k[closed])
        # Midpoints repeat; keep the EM's sigmas above half a bucket's width in ln x.
        floor = max(1e-3, 0.5 * float(np.median(widths))) if widths.size else 1e-2
        order = np.argsort(y, kind="stable")
        short = []
        for start in _em_starts(y[order], n_k[order], floor):
            theta, ll_rep = _em_two_normals(y[order], n_k[order], start, floor, max_iter=100)
            if min(theta[0], 1 - theta[0]) * total >= _MIN_COMPONENT_COUNT:
                short.append((ll_rep, theta))
        # The two best EM solutions on the midpoints, and the single lognormal with a small
        # slow share far above it, each maximised; the best of them is polished.
        candidates = [theta for _, theta in sorted(short, key=lambda r: -r[0])[:2]]
        mu, s = thetas["lognormal"][0]
        candidates.append((0.01, mu, s, mu + 3.0 * s, s))
        best_mix: tuple[tuple[float, ...], float] | None = None
        for start in candidates:
            theta, ll = _maximise_interval("mixture", start, edges, counts, polish=False)
            if best_mix is None or ll > best_mix[1]:
                best_mix = (theta, ll)
        if best_mix is None:
            omitted.append(("mixture", "no starting point gave a usable mixture"))
        else:
            theta, ll = _maximise_interval("mixture", best_mix[0], edges, counts)
            thetas["mixture"] = (_order_mixture(theta), ll)

    notes.extend(_mixture_notes(thetas["mixture"][0] if "mixture" in thetas else None))
    finite = np.isfinite(b)
    emp = cum[finite] / total
    fits = []
    for family in FAMILIES:
        if family not in thetas:
            continue
        theta, ll = thetas[family]
        ks = 0.0
        if finite.any():
            cdf, _ = _cdf_sf(family, theta, b[finite])
            ks = float(np.max(np.abs(emp - cdf)))
        fits.append(_make_fit(family, theta, ll, ks))

    notes.extend(_selection_notes(fits))
    if counts[-1] > 0 and not math.isfinite(b[-1]):
        notes.append(
            f"{counts[-1] / total:.2%} of the observations lie above the last finite bound "
            f"({b[-2]:.4g} ms): beyond it the fits' tails are extrapolated, not measured"
        )
    data_q = [_histogram_quantile(lower, b, cum, q) for q in _QUANTILES]
    for q, v in zip(_QUANTILES, data_q, strict=True):
        if v is None:
            notes.append(
                f"the data's p{q * 100:g} lies in the open last bucket (above "
                f"{b[-2]:.4g} ms) and cannot be read from the histogram"
            )
    data_mean: float | None = None
    if counts[-1] > 0 and not math.isfinite(b[-1]):
        notes.append("the data's mean is unknown: observations lie in the open last bucket")
    else:
        mids = (lower[keep] + b[keep]) / 2.0
        data_mean = float(np.sum(n_k * mids) / total)
    best = min(fits, key=lambda f: f.aic)
    return FitReport(
        source="cumulative histogram",
        n_observations=int(total),
        data_p50_ms=data_q[0],
        data_p99_ms=data_q[1],
        data_p999_ms=data_q[2],
        data_mean_ms=data_mean,
        data_quantile_method=(
            "data percentiles interpolated linearly within the bucket that holds them "
            "(the first bucket starts at 0); data mean from bucket midpoints"
        ),
        ks_method=(
            "Kolmogorov-Smirnov statistic at the finite bucket bounds only (a lower bound "
            "on the statistic of the raw samples)"
        ),
        fits=tuple(fits),
        best_family=best.family,
        selection_note=SELECTION_NOTE + " (log-likelihood of the bucket counts)",
        omitted=tuple(omitted),
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- TOML entry


def _sig4(value: float) -> Decimal:
    """value rounded to 4 significant figures, as an exact decimal."""
    if value == 0 or not math.isfinite(value):
        raise ValueError(f"cannot print {value!r} in a profile entry")
    return Decimal(format(value, ".4g"))


def _toml_float(d: Decimal) -> str:
    """A TOML float literal for d (always with a '.' or an exponent, so it stays a float)."""
    if d == 0:
        return "0.0"
    exp = d.adjusted()
    if -5 <= exp < 15:
        text = format(d, "f")
        if "." not in text:
            text += ".0"
        return text
    mantissa, _, e = format(d, "e").partition("e")
    if "." not in mantissa:
        mantissa += ".0"
    return f"{mantissa}e{int(e)}"


def _lognormal_entry(median_ms: float, sigma: float) -> str:
    p99_ms = median_ms * math.exp(sigma * _z99())
    return (
        f'{{ kind = "lognormal", p50_ms = {_toml_float(_sig4(median_ms))}, '
        f"p99_ms = {_toml_float(_sig4(p99_ms))} }}"
    )


def profile_entry_toml(fit: FamilyFit) -> str:
    """One-line TOML inline table for ``fit`` in the project's profile format.

    lognormal: ``{ kind = "lognormal", p50_ms = .., p99_ms = .. }`` (p99 = median ·
    exp(sigma · z_0.99), z_0.99 = scipy.stats.norm.ppf(0.99)); gamma and Weibull:
    ``{ kind = .., shape = .., scale_ms = .. }``; mixture: ``{ kind = "mixture", parts =
    [ { share = .., profile = {..} }, .. ] }``. Numbers are rounded to 4 significant
    figures; in a mixture the outlier share is rounded so and the body's share is printed
    as its exact decimal complement, so that the printed shares sum to exactly 1.
    """
    if fit.family == "lognormal":
        return _lognormal_entry(fit.parameter("median_ms"), fit.parameter("sigma"))
    if fit.family in ("gamma", "weibull"):
        shape = _toml_float(_sig4(fit.parameter("shape")))
        scale = _toml_float(_sig4(fit.parameter("scale_ms")))
        return f'{{ kind = "{fit.family}", shape = {shape}, scale_ms = {scale} }}'
    if fit.family == "mixture":
        if len(fit.parts) != 2:
            raise ValueError("a mixture fit must have exactly two parts")
        body, outliers = fit.parts
        outlier_share = _sig4(outliers.share)
        body_share = Decimal(1) - outlier_share
        if not (0 < outlier_share < 1):
            raise ValueError(f"mixture share {outliers.share!r} does not lie in (0, 1)")
        pieces = [
            f"{{ share = {_toml_float(share)}, profile = "
            f"{_lognormal_entry(part.median_ms, part.sigma)} }}"
            for share, part in ((body_share, body), (outlier_share, outliers))
        ]
        return f'{{ kind = "mixture", parts = [ {", ".join(pieces)} ] }}'
    raise ValueError(f"no profile entry for family {fit.family!r}")

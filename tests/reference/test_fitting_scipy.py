"""Reference checks of commitadvisor.fitting against scipy.stats and known parameters.

The module solves the likelihood equations itself (closed form, Choi–Wette, Cohen);
scipy.stats' own maximum-likelihood fitters (location fixed at 0) are the outside reference,
and the true parameters of seeded synthetic samples are the other. Statistical tolerances
are five standard errors taken from the Fisher information at the true parameters, so a
correct fitter fails with a chance well below one in a million per check; every seed is
fixed, so the tests are deterministic.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special, stats

from commitadvisor.fitting import fit_cumulative_histogram, fit_samples

N = 10_000
Z99 = float(stats.norm.ppf(0.99))
EULER_GAMMA = 0.5772156649015329  # Euler–Mascheroni constant (from memory; = -digamma(1))


def _rng(seed: int) -> np.random.Generator:
    return np.random.default_rng(seed)


def _bucket(samples: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Cumulative counts at each upper bound, as a monitoring system would export them."""
    return np.searchsorted(np.sort(samples), bounds, side="right").astype(float)


# Bounds a factor √2 apart from 10 µs to about 33 s, then +inf.
BOUNDS_MS = np.concatenate([0.01 * 2.0 ** (np.arange(0, 44) / 2.0), [np.inf]])


def test_euler_constant_matches_scipy():
    assert EULER_GAMMA == pytest.approx(-float(special.digamma(1.0)), rel=1e-15)


# --------------------------------------------------------------------------- lognormal


@pytest.fixture(scope="module")
def lognormal_case():
    median_ms, sigma = 0.6, math.log(3.0 / 0.6) / Z99  # p50 0.6 ms, p99 3 ms
    x = _rng(101).lognormal(math.log(median_ms), sigma, N)
    return x, median_ms, sigma, fit_samples(x)


def test_lognormal_matches_scipy_fit(lognormal_case):
    x, _, _, report = lognormal_case
    s_ref, loc, scale_ref = stats.lognorm.fit(x, floc=0)
    assert loc == 0
    fit = report.fit("lognormal")
    assert fit.parameter("sigma") == pytest.approx(s_ref, rel=1e-9)
    assert fit.parameter("median_ms") == pytest.approx(scale_ref, rel=1e-9)
    ll_ref = float(np.sum(stats.lognorm.logpdf(x, s_ref, scale=scale_ref)))
    assert fit.log_likelihood == pytest.approx(ll_ref, rel=1e-10)


def test_lognormal_recovers_true_parameters(lognormal_case):
    _, median_ms, sigma, report = lognormal_case
    fit = report.fit("lognormal")
    # Normal-theory MLE of ln x: SE(mu) = sigma/sqrt(n), SE(sigma) = sigma/sqrt(2n).
    se_mu, se_sigma = sigma / math.sqrt(N), sigma / math.sqrt(2 * N)
    assert abs(math.log(fit.parameter("median_ms")) - math.log(median_ms)) < 5 * se_mu
    assert abs(fit.parameter("sigma") - sigma) < 5 * se_sigma
    assert report.best_family == "lognormal"


def test_lognormal_figures_match_scipy_distribution(lognormal_case):
    _, _, _, report = lognormal_case
    fit = report.fit("lognormal")
    dist = stats.lognorm(fit.parameter("sigma"), scale=fit.parameter("median_ms"))
    assert fit.p50_ms == pytest.approx(dist.ppf(0.5), rel=1e-12)
    assert fit.p99_ms == pytest.approx(dist.ppf(0.99), rel=1e-12)
    assert fit.p999_ms == pytest.approx(dist.ppf(0.999), rel=1e-12)
    assert fit.mean_ms == pytest.approx(dist.mean(), rel=1e-12)


def test_ks_statistic_matches_scipy_kstest(lognormal_case):
    x, _, _, report = lognormal_case
    for family, dist in (
        (
            "lognormal",
            lambda f: stats.lognorm(f.parameter("sigma"), scale=f.parameter("median_ms")),
        ),
        ("gamma", lambda f: stats.gamma(f.parameter("shape"), scale=f.parameter("scale_ms"))),
        (
            "weibull",
            lambda f: stats.weibull_min(f.parameter("shape"), scale=f.parameter("scale_ms")),
        ),
    ):
        fit = report.fit(family)
        ref = stats.kstest(x, dist(fit).cdf).statistic
        assert fit.ks_statistic == pytest.approx(ref, rel=1e-9, abs=1e-12)


def test_data_percentiles_match_numpy(lognormal_case):
    x, _, _, report = lognormal_case
    assert report.data_p50_ms == pytest.approx(float(np.quantile(x, 0.5)), rel=1e-12)
    assert report.data_p99_ms == pytest.approx(float(np.quantile(x, 0.99)), rel=1e-12)
    assert report.data_p999_ms == pytest.approx(float(np.quantile(x, 0.999)), rel=1e-12)
    assert report.data_mean_ms == pytest.approx(float(np.mean(x)), rel=1e-12)


def test_aic_is_two_k_minus_two_log_likelihood(lognormal_case):
    _, _, _, report = lognormal_case
    for fit in report.fits:
        assert fit.aic == pytest.approx(2 * fit.n_parameters - 2 * fit.log_likelihood, rel=1e-12)
    assert report.best.aic == min(f.aic for f in report.fits)


# --------------------------------------------------------------------------- gamma


@pytest.fixture(scope="module")
def gamma_case():
    shape, scale_ms = 2.1, 0.4
    x = _rng(202).gamma(shape, scale_ms, N)
    return x, shape, scale_ms, fit_samples(x)


def test_gamma_matches_scipy_fit(gamma_case):
    x, _, _, report = gamma_case
    a_ref, _, scale_ref = stats.gamma.fit(x, floc=0)
    fit = report.fit("gamma")
    assert fit.parameter("shape") == pytest.approx(a_ref, rel=1e-6)
    assert fit.parameter("scale_ms") == pytest.approx(scale_ref, rel=1e-6)
    ll_ref = float(np.sum(stats.gamma.logpdf(x, a_ref, scale=scale_ref)))
    assert fit.log_likelihood >= ll_ref - 1e-8


def test_gamma_recovers_true_parameters(gamma_case):
    _, shape, scale_ms, report = gamma_case
    fit = report.fit("gamma")
    # Fisher information per observation in (k, theta): [[psi1(k), 1/theta],
    # [1/theta, k/theta^2]] (standard result, e.g. Johnson, Kotz and Balakrishnan,
    # Continuous Univariate Distributions vol. 1, ch. 17 -- from memory).
    info = np.array(
        [[float(special.polygamma(1, shape)), 1 / scale_ms], [1 / scale_ms, shape / scale_ms**2]]
    )
    cov = np.linalg.inv(info) / N
    assert abs(fit.parameter("shape") - shape) < 5 * math.sqrt(cov[0, 0])
    assert abs(fit.parameter("scale_ms") - scale_ms) < 5 * math.sqrt(cov[1, 1])
    assert report.best_family == "gamma"
    dist = stats.gamma(fit.parameter("shape"), scale=fit.parameter("scale_ms"))
    assert fit.p99_ms == pytest.approx(dist.ppf(0.99), rel=1e-10)
    assert fit.mean_ms == pytest.approx(dist.mean(), rel=1e-12)


# --------------------------------------------------------------------------- Weibull


@pytest.fixture(scope="module")
def weibull_case():
    shape, scale_ms = 1.3, 0.7
    x = scale_ms * _rng(303).weibull(shape, N)
    return x, shape, scale_ms, fit_samples(x)


def test_weibull_matches_scipy_fit(weibull_case):
    x, _, _, report = weibull_case
    c_ref, _, scale_ref = stats.weibull_min.fit(x, floc=0)
    fit = report.fit("weibull")
    # scipy maximises numerically (looser tolerance); both maximise the same likelihood.
    assert fit.parameter("shape") == pytest.approx(c_ref, rel=1e-3)
    assert fit.parameter("scale_ms") == pytest.approx(scale_ref, rel=1e-3)
    ll_ref = float(np.sum(stats.weibull_min.logpdf(x, c_ref, scale=scale_ref)))
    assert fit.log_likelihood >= ll_ref - 1e-8


def test_weibull_recovers_true_parameters(weibull_case):
    _, shape, scale_ms, report = weibull_case
    fit = report.fit("weibull")
    # Asymptotic variances from the Weibull Fisher information (Cohen, Technometrics 1965;
    # from memory, re-derived): Var k = 6 k^2 / (pi^2 n),
    # Var scale = scale^2 (1 + 6 (1 - gamma)^2 / pi^2) / (k^2 n).
    se_k = math.sqrt(6 * shape**2 / (math.pi**2 * N))
    se_scale = math.sqrt(
        scale_ms**2 * (1 + 6 * (1 - EULER_GAMMA) ** 2 / math.pi**2) / (shape**2 * N)
    )
    assert abs(fit.parameter("shape") - shape) < 5 * se_k
    assert abs(fit.parameter("scale_ms") - scale_ms) < 5 * se_scale
    assert report.best_family == "weibull"
    dist = stats.weibull_min(fit.parameter("shape"), scale=fit.parameter("scale_ms"))
    assert fit.p50_ms == pytest.approx(dist.ppf(0.5), rel=1e-10)
    assert fit.p999_ms == pytest.approx(dist.ppf(0.999), rel=1e-10)
    assert fit.mean_ms == pytest.approx(dist.mean(), rel=1e-10)


# --------------------------------------------------------------------------- mixture

BODY_MEDIAN_MS, BODY_P99_MS = 0.5, 1.2
OUT_MEDIAN_MS, OUT_P99_MS = 800.0, 1500.0
OUT_SHARE = 0.005
N_MIX = 20_000


@pytest.fixture(scope="module")
def mixture_samples():
    rng = _rng(404)
    body_sigma = math.log(BODY_P99_MS / BODY_MEDIAN_MS) / Z99
    out_sigma = math.log(OUT_P99_MS / OUT_MEDIAN_MS) / Z99
    x = rng.lognormal(math.log(BODY_MEDIAN_MS), body_sigma, N_MIX)
    slow = rng.random(N_MIX) < OUT_SHARE
    x[slow] = rng.lognormal(math.log(OUT_MEDIAN_MS), out_sigma, int(slow.sum()))
    return x, body_sigma, out_sigma


@pytest.fixture(scope="module")
def mixture_report(mixture_samples):
    return fit_samples(mixture_samples[0])


def test_mixture_recovers_outlier_share(mixture_samples, mixture_report):
    _, body_sigma, out_sigma = mixture_samples
    fit = mixture_report.fit("mixture")
    # The share is a binomial proportion: SE = sqrt(p (1 - p) / n).
    se_share = math.sqrt(OUT_SHARE * (1 - OUT_SHARE) / N_MIX)
    assert abs(fit.outlier_share - OUT_SHARE) < 5 * se_share
    # Each part's ln-median has SE sigma / sqrt(n_part).
    se_body = body_sigma / math.sqrt(N_MIX * (1 - OUT_SHARE))
    se_out = out_sigma / math.sqrt(N_MIX * OUT_SHARE)
    assert abs(math.log(fit.parameter("body_median_ms") / BODY_MEDIAN_MS)) < 5 * se_body
    assert abs(math.log(fit.parameter("outlier_median_ms") / OUT_MEDIAN_MS)) < 5 * se_out
    assert mixture_report.best_family == "mixture"


def test_mixture_quantiles_and_mean_against_scipy_parts(mixture_samples, mixture_report):
    x = mixture_samples[0]
    fit = mixture_report.fit("mixture")
    body, slow = fit.parts
    assert body.share + slow.share == pytest.approx(1.0, abs=1e-15)
    parts = [
        (body.share, stats.lognorm(body.sigma, scale=body.median_ms)),
        (slow.share, stats.lognorm(slow.sigma, scale=slow.median_ms)),
    ]
    for q, value in ((0.5, fit.p50_ms), (0.99, fit.p99_ms), (0.999, fit.p999_ms)):
        assert sum(w * d.cdf(value) for w, d in parts) == pytest.approx(q, abs=1e-9)
    assert fit.mean_ms == pytest.approx(sum(w * d.mean() for w, d in parts), rel=1e-12)
    ll_ref = float(np.sum(np.log(sum(w * d.pdf(x) for w, d in parts))))
    assert fit.log_likelihood == pytest.approx(ll_ref, rel=1e-9)


def test_mixture_likelihood_not_below_single_lognormal(mixture_report):
    # The lognormal is a special case of the mixture, so the mixture's maximum is at least
    # as high (a property of nested models).
    assert (
        mixture_report.fit("mixture").log_likelihood
        >= mixture_report.fit("lognormal").log_likelihood
    )


# --------------------------------------------------------------------------- histograms


@pytest.mark.parametrize(
    ("family", "case", "names"),
    [
        ("lognormal", "lognormal_case", ("median_ms", "sigma")),
        ("gamma", "gamma_case", ("shape", "scale_ms")),
        ("weibull", "weibull_case", ("shape", "scale_ms")),
    ],
)
def test_histogram_fit_agrees_with_sample_fit(family, case, names, request):
    x, p1, p2, sample_report = request.getfixturevalue(case)
    hist_report = fit_cumulative_histogram(BOUNDS_MS, _bucket(x, BOUNDS_MS))
    assert hist_report.n_observations == N
    assert hist_report.best_family == family
    fs, fh = sample_report.fit(family), hist_report.fit(family)
    # Tolerance: with buckets √2 apart the grouped estimate loses little information, and
    # for efficient estimators Var(grouped - full) = Var(grouped) - Var(full), well below
    # Var(full); five full-sample standard errors (as above) therefore bound the gap.
    se = _standard_errors(family, p1, p2)
    for name, s in zip(names, se, strict=True):
        assert abs(fh.parameter(name) - fs.parameter(name)) < 5 * s, name
    assert fh.p99_ms == pytest.approx(fs.p99_ms, rel=0.02)


def _standard_errors(family: str, p1: float, p2: float) -> tuple[float, float]:
    if family == "lognormal":
        median_ms, sigma = p1, p2
        return median_ms * sigma / math.sqrt(N), sigma / math.sqrt(2 * N)  # delta method
    if family == "gamma":
        k, th = p1, p2
        info = np.array([[float(special.polygamma(1, k)), 1 / th], [1 / th, k / th**2]])
        cov = np.linalg.inv(info) / N
        return math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    k, lam = p1, p2
    return (
        math.sqrt(6 * k**2 / (math.pi**2 * N)),
        math.sqrt(lam**2 * (1 + 6 * (1 - EULER_GAMMA) ** 2 / math.pi**2) / (k**2 * N)),
    )


def test_histogram_mixture_recovers_outlier_share(mixture_samples, mixture_report):
    x = mixture_samples[0]
    hist_report = fit_cumulative_histogram(BOUNDS_MS, _bucket(x, BOUNDS_MS))
    fh = hist_report.fit("mixture")
    # The buckets separate body and outliers cleanly, so the grouped share equals the
    # sample share up to optimiser tolerance; both lie within 5 binomial SE of the truth.
    se_share = math.sqrt(OUT_SHARE * (1 - OUT_SHARE) / N_MIX)
    assert abs(fh.outlier_share - OUT_SHARE) < 5 * se_share
    assert fh.outlier_share == pytest.approx(mixture_report.fit("mixture").outlier_share, rel=1e-3)
    assert hist_report.best_family == "mixture"


def test_histogram_data_percentiles_near_sample_percentiles(lognormal_case):
    x, _, _, report = lognormal_case
    hist = fit_cumulative_histogram(BOUNDS_MS, _bucket(x, BOUNDS_MS))
    # Linear interpolation inside a bucket √2 wide is off by at most the bucket's width.
    for got, ref in (
        (hist.data_p50_ms, report.data_p50_ms),
        (hist.data_p99_ms, report.data_p99_ms),
    ):
        assert got is not None
        assert ref / math.sqrt(2) < got < ref * math.sqrt(2)
    # This histogram's top bucket is empty, so the mean is defined (from bucket midpoints).
    # Every sample lies in a bucket (a, sqrt(2) a] (none falls in the first one, 6 sigma
    # below the median), whose midpoint is within (sqrt(2) - 1) / 2 < 0.21 of a <= x of
    # the sample, so the midpoint mean is within 21 % of the sample mean.
    assert x.min() > BOUNDS_MS[0]
    assert hist.data_mean_ms == pytest.approx(report.data_mean_ms, rel=0.21)

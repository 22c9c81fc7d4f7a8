"""Checks of the simpy reference models against closed forms and published values.

Each check names its source beside it. Statistical tolerances come from the run itself:
the standard error of a mean is estimated by non-overlapping batch means (32 batches in
arrival or completion order, so that the correlation between neighbouring commits stays
inside a batch) and a check allows four standard errors plus half a unit of the last
digit of a published figure. A check whose tolerance is not statistical says why.

Heavy-tailed flush times (the lognormal p50 1 / p99 10 ms profile) get five standard
errors: the mean of such a run is skewed, and a run that happens to miss the rare long
flushes comes out low with a small estimated standard error at the same time (over 12
seeds at 800 commits/s the spread of run means was 0.045 ms against per-run estimates of
0.030-0.056 ms), so four estimated standard errors would fail about one run in a hundred.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import simpy

from tests.reference.simpy_models import (
    LogDevice,
    exp_sampler,
    fixed_sampler,
    lognormal_sampler,
    mixture_sampler,
    run_closed,
    run_deferred,
    run_dual,
    run_open,
)

BATCHES = 32
Z_TOL = 4.0  # standard errors allowed
Z_HEAVY = 5.0  # for heavy-tailed flush times (see above)


def batch_means(values: np.ndarray, batches: int = BATCHES) -> tuple[float, float]:
    """Mean of ``values`` and its standard error from ``batches`` batch means."""
    values = np.asarray(values, dtype=float)
    n = values.size // batches * batches
    means = values[:n].reshape(batches, -1).mean(axis=1)
    return float(values.mean()), float(means.std(ddof=1) / math.sqrt(batches))


def assert_mean(
    values: np.ndarray, expected: float, rounding: float = 0.0, z: float = Z_TOL
) -> float:
    mean, se = batch_means(values)
    tolerance = z * se + rounding
    assert abs(mean - expected) <= tolerance, (
        f"mean {mean:.5g} vs expected {expected:.5g}: off by {abs(mean - expected):.3g}, "
        f"allowed {tolerance:.3g} ({z:g} x SE {se:.3g} + rounding {rounding:g})"
    )
    return mean


def assert_closed_throughput(result, sessions, think_ms, expected_per_s, rounding, z=Z_TOL):
    """X against a published or exact value, and Little's law on the sessions.

    X = N / (Z_obs + R) over the window (Little, Operations Research 9(3), 1961), so its
    noise is that of the mean cycle: the batch-means SE of R and the SE of the mean of n
    exponential think times, Z / sqrt(n); dX = N / (Z + R)^2 d(cycle) (delta method).
    """
    n = result.response_ms.size
    _, se_r = batch_means(result.response_ms)
    se_think = think_ms / math.sqrt(n)
    se_cycle = math.hypot(se_r, se_think)
    cycle = think_ms + result.mean_response_ms
    se_x = sessions / cycle**2 * se_cycle * 1000.0
    x = result.throughput_per_s
    assert abs(x - expected_per_s) <= z * se_x + rounding, (x, expected_per_s, se_x)
    # N = X (Z_obs + R): with the think times' own noise and N partial cycles at each edge.
    implied_r = sessions / x * 1000.0 - think_ms
    edge = 2 * sessions / n * cycle
    gap = abs(implied_r - result.mean_response_ms)
    assert gap <= Z_TOL * se_think + edge, (implied_r, result.mean_response_ms)


LOGNORMAL_1_10 = lognormal_sampler(1.0, 10.0)


# ------------------------------------------------------------------------ samplers
@pytest.mark.parametrize(
    ("sampler", "mean_ms"),
    [
        (exp_sampler(2.0), 2.0),
        (fixed_sampler(1.5), 1.5),
        # lognormal from percentiles: sigma = ln(10)/z_0.99, mean = exp(sigma^2/2) = 1.632 ms
        # (CHECKS.md, "Mean flush 1.632 ms")
        (LOGNORMAL_1_10, 1.632),
        (mixture_sampler([(0.25, fixed_sampler(4.0)), (0.75, exp_sampler(2.0))]), 2.5),
    ],
)
def test_sampler_means(sampler, mean_ms):
    # The sample mean of 40,000 independent draws; SE from the draws themselves.
    rng = np.random.default_rng(11)
    draws = np.array([sampler(rng) for _ in range(40_000)])
    se = draws.std(ddof=1) / math.sqrt(draws.size)
    assert abs(draws.mean() - mean_ms) <= Z_TOL * se + 5e-4


def test_lognormal_sampler_percentiles():
    # The sampler is fixed by its median and 99th percentile; the empirical cdf at those
    # points is a binomial proportion with SE sqrt(p(1-p)/n).
    rng = np.random.default_rng(12)
    draws = np.array([LOGNORMAL_1_10(rng) for _ in range(40_000)])
    for p, x in ((0.5, 1.0), (0.99, 10.0)):
        share = np.mean(draws <= x)
        assert abs(share - p) <= Z_TOL * math.sqrt(p * (1 - p) / draws.size)


def test_bad_inputs_are_refused():
    with pytest.raises(ValueError, match="sum to 1"):
        mixture_sampler([(0.5, fixed_sampler(1.0))])
    with pytest.raises(ValueError, match="p99_ms"):
        lognormal_sampler(2.0, 1.0)
    with pytest.raises(ValueError, match="gather"):
        run_open(100, fixed_sampler(1.0), mode="batched", seed=1, commits=10)
    with pytest.raises(ValueError, match="flush sampler returned"):
        run_open(100, lambda rng: -1.0, mode="group", seed=1, commits=10)


def test_same_seed_same_run_and_other_seed_other_run():
    # DESIGN.md honesty rules: seeds are explicit, the same seed gives the same output.
    first = run_open(300, LOGNORMAL_1_10, mode="group", seed=5, commits=2_000, warmup_commits=100)
    again = run_open(300, LOGNORMAL_1_10, mode="group", seed=5, commits=2_000, warmup_commits=100)
    other = run_open(300, LOGNORMAL_1_10, mode="group", seed=6, commits=2_000, warmup_commits=100)
    assert np.array_equal(first.response_ms, again.response_ms)
    assert not np.array_equal(first.response_ms, other.response_ms)


# ------------------------------------------------------------------------ one flush per commit
def test_mm1_mean_and_p99():
    # M/M/1 (Kleinrock, Queueing Systems vol. 1, 1975; numbers from CHECKS.md, Jain 1991
    # Example 31.1 - memory, computed): lambda = 125/s, S = 2 ms -> R = S/(1-rho) = 2.667 ms,
    # sojourn ~ Exp(mu - lambda) so P(T <= 12.28 ms) = 0.99.
    result = run_open(125, exp_sampler(2.0), mode="one_per_commit", seed=101, commits=80_000)
    assert_mean(result.response_ms, 2.0 / (1 - 0.25), rounding=5e-4)
    assert_mean(result.response_ms <= 12.28, 0.99, rounding=1e-4)  # 12.28 = 2.667 ln 100
    # Utilisation law: busy share = lambda S = 0.25 (SE ~ that of the mean response / R).
    assert abs(result.writer_busy_share - 0.25) <= 0.01
    assert result.batch_sizes.max() == 1


def test_md1_pollaczek_khinchine():
    # M/D/1, rho = 0.8, S = 1 ms: Wq = rho S / (2(1 - rho)) = 2 ms, W = 3 S
    # (Pollaczek-Khinchine; Kleinrock 1975 ch. 5; CHECKS.md).
    result = run_open(800, fixed_sampler(1.0), mode="one_per_commit", seed=102, commits=60_000)
    assert_mean(result.response_ms, 3.0)


def test_closed_one_per_commit_matches_exact_mva():
    # Exact MVA (CHECKS.md, "Exact MVA", Lazowska et al. 1984): one FCFS exponential station,
    # D = 2 ms, N = 5 sessions, exponential think Z = 10 ms. R(n) = D (1 + Q(n-1)),
    # X(n) = n / (Z + R(n)), Q(n) = X(n) R(n).
    demand, think, sessions = 2.0, 10.0, 5
    queue = 0.0
    for n in range(1, sessions + 1):
        response = demand * (1 + queue)
        throughput = n / (think + response)
        queue = throughput * response
    result = run_closed(
        sessions, think, exp_sampler(demand), mode="one_per_commit", seed=103, commits=40_000
    )
    assert_mean(result.response_ms, response)
    assert_closed_throughput(result, sessions, think, throughput * 1000.0, rounding=0.0)


# ------------------------------------------------------------------------ natural group commit
@pytest.mark.parametrize(("x", "published"), [(0.1, 1.0498), (1.0, 1.3655), (5.0, 1.4993)])
def test_group_commit_deterministic_flush(x, published):
    # CHECKS.md, natural group commit (derived twice independently; computed): Poisson
    # lambda, flush F: E[wait] = F (1.5x + e^-x)/(x + e^-x), E[batch] = x + e^-x, x = lambda F;
    # writer busy share rho_w = x / (x + e^-x) (DESIGN.md model 1 with p = e^-x).
    flush = 1.0
    result = run_open(x * 1000.0, fixed_sampler(flush), mode="group", seed=104, commits=40_000)
    assert_mean(result.response_ms, published * flush, rounding=5e-5)
    mean_batch = assert_mean(result.batch_sizes, x + math.exp(-x))
    # busy share = flushes x F / time = lambda F / E[batch]: its relative SE is the batch's.
    _, se_batch = batch_means(result.batch_sizes)
    rho_w = x / (x + math.exp(-x))
    assert abs(result.writer_busy_share - rho_w) <= rho_w * (Z_TOL * se_batch / mean_batch + 0.01)


@pytest.mark.parametrize(("rate_per_s", "published_ms"), [(100, 1.98), (800, 3.26)])
def test_group_commit_lognormal_flush(rate_per_s, published_ms):
    # CHECKS.md: lognormal flush p50 1 ms / p99 10 ms (computed by quadrature, confirmed by a
    # one-million-commit simulation): lambda = 100/s -> 1.98 ms, 800/s -> 3.26 ms.
    result = run_open(rate_per_s, LOGNORMAL_1_10, mode="group", seed=105, commits=80_000)
    assert_mean(result.response_ms, published_ms, rounding=0.005, z=Z_HEAVY)


@pytest.mark.parametrize(
    ("sessions", "x_per_s", "r_ms", "r_rounding"), [(5, 399, 2.53, 0.005), (20, 1491, 3.40, 0.01)]
)
def test_closed_group_commit_lognormal(sessions, x_per_s, r_ms, r_rounding):
    # CHECKS.md, closed workloads with natural group commit (simulation and embedded Markov
    # chain agree): lognormal p50 1 / p99 10 ms, exponential think Z = 10 ms:
    # N = 5 -> X = 399/s, R = 2.53 ms; N = 20 -> X = 1491/s, R = 3.39-3.41 ms.
    think = 10.0
    result = run_closed(sessions, think, LOGNORMAL_1_10, seed=106, commits=60_000)
    assert_mean(result.response_ms, r_ms, rounding=r_rounding, z=Z_HEAVY)
    assert_closed_throughput(result, sessions, think, x_per_s, rounding=0.5, z=Z_HEAVY)


def test_closed_fixed_think_single_session_is_deterministic():
    # Exact, no source needed: one session, fixed think Z and fixed flush F -> every cycle
    # lasts Z + F, so X = 1/(Z + F) and R = F exactly.
    result = run_closed(1, 4.0, fixed_sampler(1.0), think="fixed", seed=107, flushes=500, warmup=5)
    assert np.allclose(result.response_ms, 1.0)
    assert result.throughput_per_s == pytest.approx(1000.0 / 5.0, rel=1e-9)


def test_size_dependent_flush_gets_the_batch_size():
    # A flush costing 0.5 ms per commit in it (a bandwidth-like cost): the device's busy time
    # is 0.5 ms per commit whatever the batching, so its busy share is lambda x 0.5 ms = 0.5
    # (work conservation). The count of commits in the window is Poisson: relative SE
    # 1/sqrt(n), four of them allowed.
    result = run_open(1000, lambda rng, batch: 0.5 * batch, mode="group", seed=108, commits=20_000)
    assert abs(result.writer_busy_share - 0.5) <= 0.5 * Z_TOL / math.sqrt(20_000)
    assert result.batch_sizes.max() > 1


# ------------------------------------------------------------------------ batched commit
def test_batched_with_target_one_is_group_commit():
    # Exact, by construction: a target of one pending commit never holds a flush, so the
    # trajectory (same seed, same streams) is the group-commit one, commit for commit.
    group = run_open(800, LOGNORMAL_1_10, mode="group", seed=109, commits=20_000)
    target_one = run_open(
        800, LOGNORMAL_1_10, mode="batched", gather_target=1, gather_window_ms=5.0, seed=109,
        commits=20_000,
    )
    assert np.array_equal(group.response_ms, target_one.response_ms)


def test_batched_window_only():
    # Derived here: window w >= F, no target, fixed flush F, Poisson lambda. The flush opened
    # by a gathering ends at a + w + F, and the next gathering's first commit arrives after
    # a + w, so its window closes after a + 2w >= a + w + F: the writer is always free when a
    # window closes. The cycles are independent: the first commit waits w + F, the Poisson
    # (lambda w) others in the window wait w/2 + F on average, so
    # E[T] = F + w (1 + lambda w / 2) / (1 + lambda w) and E[batch] = 1 + lambda w.
    # w = 2 ms, F = 1 ms, lambda = 500/s: E[T] = 2.5 ms, E[batch] = 2.
    result = run_open(
        500, fixed_sampler(1.0), mode="batched", gather_window_ms=2.0, seed=110, commits=30_000
    )
    assert_mean(result.response_ms, 2.5)
    assert_mean(result.batch_sizes, 2.0)


def test_batched_target_only():
    # Derived here: target K, no window, fixed flush F much shorter than K/lambda. Batches are
    # consecutive groups of K arrivals; the i-th commit of a group waits for K - i further
    # arrivals and then the flush: E[T] = F + (K - 1)/(2 lambda). K = 4, F = 0.1 ms,
    # lambda = 1000/s: 1.6 ms (the chance that K arrivals come within one flush, which would
    # delay a batch, is P(Poisson(0.1) >= 4) ~ 4e-6: negligible).
    result = run_open(
        1000, fixed_sampler(0.1), mode="batched", gather_target=4, seed=111, commits=30_000
    )
    assert_mean(result.response_ms, 0.1 + 3 / (2 * 1.0))
    assert np.mean(result.batch_sizes == 4) > 0.999


# ------------------------------------------------------------------------ CPU station
def test_cpu_station_is_erlang_c():
    # Erlang C (M/M/c; CHECKS.md, c = 3, a = 2 -> C = 4/9): Wq = C S/(c - a), so the CPU
    # sojourn is S + Wq = 1 + 4/9 ms for S = 1 ms exponential, lambda = 2000/s.
    result = run_open(
        2000, fixed_sampler(0.01), mode="group", seed=112, commits=30_000,
        cpu_servers=3, cpu_ms_per_commit=exp_sampler(1.0),
    )
    assert_mean(result.cpu_response_ms, 1.0 + 4.0 / 9.0, rounding=1e-4)
    assert np.all(result.response_ms >= result.cpu_response_ms)


# ------------------------------------------------------------------------ stalls
def _flush_end(schedule, start_ms, work_ms):
    env = simpy.Environment()
    device = LogDevice(env, schedule=schedule)
    end = []

    def one():
        yield env.timeout(start_ms)
        yield from device.flush(work_ms)
        end.append(env.now)

    env.process(one())
    env.run()
    return end[0]


@pytest.mark.parametrize(
    ("schedule", "start_ms", "work_ms", "end_ms"),
    [
        ([], 0.0, 10.0, 10.0),
        ([(5.0, 20.0)], 0.0, 10.0, 30.0),  # in flight: planned 10 + 20 ms of stall
        ([(5.0, 20.0)], 10.0, 4.0, 29.0),  # starts during the stall: waits until 25
        ([(5.0, 20.0), (10.0, 30.0)], 0.0, 10.0, 45.0),  # overlapping: stalled on [5, 40]
        ([(20.0, 5.0)], 0.0, 10.0, 10.0),  # the stall comes after the flush
    ],
)
def test_device_stall_semantics(schedule, start_ms, work_ms, end_ms):
    # The stated semantics, worked by hand: no progress while any stall is active.
    assert _flush_end(schedule, start_ms, work_ms) == pytest.approx(end_ms)


def test_stalls_at_light_load():
    # Sanity check derived here. Stalls start as Poisson(r), r = 0.5/s, each lasting D = 600
    # ms; overlapping stalls merge. A merged stall period B is D plus the K gaps shorter than
    # D that follow its start, K geometric with q = P(gap < D) = 1 - e^-rD, the gaps
    # exponential truncated to [0, D]; stalled periods alternate with Exp(r) free periods.
    # Renewal-reward (alternating renewal; Ross, Introduction to Probability Models, ch. 7 -
    # from memory): the mean wait at a random instant until the device is free is
    # E[B^2] / (2 (E[B] + 1/r)) = 99.7 ms (the share of time stalled is 1 - e^-rD = 0.259, the
    # mean residual of a stalled period E[B^2]/(2 E[B]) = 385 ms; without overlaps it would be
    # r D x D/2 = 90 ms). At lambda = 2/s and F = 1 ms a commit adds that wait to its flush
    # (queueing behind another commit, or a stall starting during its own flush, adds well
    # under 1 ms: lambda E[B] F and r F E[B]); arrivals see time averages (Poisson, PASTA).
    # Tolerance: 4 batch-means SE (the spread comes from the ~10,000 stalls observed) + 1 ms.
    r, d = 0.5 / 1000.0, 600.0
    q = 1.0 - math.exp(-r * d)
    k1, k2 = q / (1 - q), q * (1 + q) / (1 - q) ** 2  # E[K], E[K^2]
    g1 = 1 / r - d * math.exp(-r * d) / q  # E[gap | gap < D]
    g2 = 2 / r**2 * (1 - math.exp(-r * d) * (1 + r * d + (r * d) ** 2 / 2)) / q
    b1 = d + k1 * g1
    b2 = d * d + 2 * d * k1 * g1 + k1 * (g2 - g1 * g1) + k2 * g1 * g1
    assert b1 == pytest.approx((math.exp(r * d) - 1) / r)  # the M/G/infinity busy period
    wait = b2 / (2 * (b1 + 1 / r))
    flush = 1.0
    result = run_open(
        2, fixed_sampler(flush), mode="group", seed=113, commits=40_000,
        stalls=(0.5, fixed_sampler(d)),
    )
    assert result.stall_count > 8_000
    mean, se = batch_means(result.response_ms)
    assert abs(mean - (flush + wait)) <= Z_TOL * se + 1.0, (mean, flush + wait, se)
    # Share of time stalled = 1 - e^-rD; relative spread ~ 1/sqrt(stalls), four allowed.
    assert abs(result.stalled_share - q) <= q * Z_TOL / math.sqrt(result.stall_count)


def test_stalls_dropped_when_one_is_active():
    # The "drop" overlap: a stall that would start during a stall never happens, so stalls
    # of D and Exp(r) gaps alternate. Alternating renewal (Ross, Introduction to Probability
    # Models, ch. 7 - from memory): stalled share rD / (1 + rD) = 0.2308 and mean wait at a
    # random instant rD / (1 + rD) x D / 2 = 69.2 ms (fixed D: the residual is uniform). The
    # same run with merging stalls waits longer (99.7 ms, above). Tolerances as above.
    r, d, flush = 0.5 / 1000.0, 600.0, 1.0
    share = r * d / (1 + r * d)
    result = run_open(
        2, fixed_sampler(flush), mode="group", seed=113, commits=40_000,
        stalls=(0.5, fixed_sampler(d), "drop"),
    )
    assert result.stall_count > 7_000
    mean, se = batch_means(result.response_ms)
    assert abs(mean - (flush + share * d / 2)) <= Z_TOL * se + 1.0, (mean, se)
    # the share's spread: ~ 1/sqrt(stalls) relative, four allowed
    assert abs(result.stalled_share - share) <= share * Z_TOL / math.sqrt(result.stall_count)
    with pytest.raises(ValueError, match="overlap"):
        run_open(2, fixed_sampler(flush), mode="group", seed=1, commits=10,
                 stalls=(0.5, fixed_sampler(d), "sometimes"))


# ------------------------------------------------------------------------ deferred commit
def test_deferred_littles_law():
    # Little's law L = lambda W (Little, Operations Research 9(3), 1961). L is measured two
    # ways, neither from the formula: the exact time integral of the number of acknowledged-
    # but-not-durable commits over the window, and that number at Poisson inspection
    # instants. The flush (lognormal p50 2 / p99 30 ms) often outlasts the 20 ms interval, so
    # late and coalesced flushes are exercised.
    result = run_deferred(
        1000, lognormal_sampler(2.0, 30.0), flush_every_ms=20.0, buffer_bytes=1 << 24,
        log_bytes_per_commit=512, seed=114, duration_s=40.0,
    )
    lw = result.commit_rate_per_s / 1000.0 * result.exposure_ms.mean()
    # Integral vs sum of exposures: they differ only by commits straddling the window's two
    # edges, at most at_risk_max at each, each by at most the longest exposure (not random).
    edge = 2 * result.at_risk_max * result.exposure_ms.max() / (result.window_s * 1000.0)
    assert abs(result.at_risk_time_avg - lw) <= edge
    assert_mean(result.at_risk_samples, lw, rounding=edge)
    assert result.batch_sizes.max() > 20  # coalesced flushes happened


def test_deferred_exposure_is_half_interval_plus_flush():
    # Derived here: ticks every I, fixed flush F < I, Poisson commits: a commit waits for the
    # next tick (uniform on [0, I], Poisson arrivals see the grid at random) and then the
    # flush, so W is uniform on [F, F + I]: E[W] = I/2 + F, P(W <= F + I/2) = 1/2. Not random:
    # F <= W <= F + I for every commit.
    interval, flush = 20.0, 2.0
    result = run_deferred(
        1000, fixed_sampler(flush), flush_every_ms=interval, buffer_bytes=1 << 24,
        log_bytes_per_commit=512, seed=115, duration_s=30.0,
    )
    assert_mean(result.exposure_ms, interval / 2 + flush)
    assert_mean(result.exposure_ms <= flush + interval / 2, 0.5)
    assert result.exposure_ms.min() >= flush - 1e-9
    assert result.exposure_ms.max() <= flush + interval + 1e-9
    assert np.all(result.ack_ms == 0.0)
    # handed to the device at the flush's start: exactly one flush before durable, so the
    # process-crash window is uniform on [0, I]
    assert np.allclose(result.exposure_ms - result.handed_ms, flush)
    assert_mean(result.handed_ms, interval / 2)
    # one flush of F every tick (each tick finds commits at 1000/s): busy F / I of the time,
    # up to the window's cut of the flush at each end
    assert result.writer_busy_share == pytest.approx(flush / interval, abs=2 * flush / 30_000)


def test_deferred_full_buffer_holds_commits_back():
    # DESIGN.md model 4: the hard bound on acknowledged-but-not-durable commits is the buffer
    # (records keep their space until their flush completes). 60 records fit; about 50 arrive
    # per 50 ms interval, so some intervals fill it and those commits wait for a flush.
    result = run_deferred(
        1000, fixed_sampler(2.0), flush_every_ms=50.0, buffer_bytes=60 * 1000,
        log_bytes_per_commit=1000, seed=116, duration_s=30.0,
    )
    assert result.at_risk_max == 60
    held = result.ack_ms > 0
    assert 0.0 < held.mean() < 0.5
    assert np.all(np.isfinite(result.exposure_ms))
    lw = result.commit_rate_per_s / 1000.0 * result.exposure_ms.mean()
    edge = 2 * result.at_risk_max * result.exposure_ms.max() / (result.window_s * 1000.0)
    assert abs(result.at_risk_time_avg - lw) <= edge  # Little (1961), as above


def test_deferred_stalls_fill_the_buffer():
    # CHECKS.md, facts of the trade (common practice, no source): deferred commit removes the
    # wait for the flush but not the bursts. 600 ms stalls at 1000 commits/s bring 600 commits
    # in one stall; the buffer holds 200, so commits wait although nobody waits for a flush.
    # Same seed without stalls: no commit waits.
    settings = dict(
        flush_every_ms=20.0, buffer_bytes=200 * 1000, log_bytes_per_commit=1000, seed=117,
        duration_s=30.0,
    )
    calm = run_deferred(1000, fixed_sampler(1.0), **settings)
    stalled = run_deferred(1000, fixed_sampler(1.0), stalls=(0.5, fixed_sampler(600.0)), **settings)
    assert np.all(calm.ack_ms == 0.0)
    assert stalled.stall_count > 5
    assert stalled.at_risk_max <= 200
    assert np.quantile(stalled.ack_ms, 0.99) > 100.0


# ------------------------------------------------------------------------ dual device
def test_dual_first_is_min_of_exponentials_at_light_load():
    # Ross, Introduction to Probability Models, ch. 5 (from memory; CHECKS.md): min(Exp a,
    # Exp b) ~ Exp(a + b) and P(first = a) = a/(a + b). Means 1 and 2 ms -> rates 1 and 0.5
    # per ms: E[min] = 2/3 ms, P(a first) = 2/3, P(min <= ln(100)/1.5) = 0.99. At 1 commit/s a
    # device is busy at an arrival with probability about lambda E[S] <= 0.002, adding at most
    # that times the mean residual flush (E[S^2]/2E[S] = E[S]): below 0.005 ms, added to the
    # tolerance. The lag to the second copy is E[max] - E[min] = (1 + 2 - 2/3) - 2/3 = 5/3 ms.
    bias = 0.001 * 1.0 + 0.002 * 2.0
    first = run_dual(1, exp_sampler(1.0), exp_sampler(2.0), seed=118, commits=30_000)
    assert_mean(first.response_ms, 2.0 / 3.0, rounding=bias)
    assert_mean(first.response_ms <= math.log(100) / 1.5, 0.99, rounding=0.002)
    assert_mean(first.durable_a_ms < first.durable_b_ms, 2.0 / 3.0, rounding=0.002)
    assert_mean(first.lag_ms, 5.0 / 3.0, rounding=bias)


def test_dual_both_acknowledges_at_the_second_copy():
    # Exact, by construction: the same seed gives the same two durable times whatever
    # ack_after says; "both" acknowledges at the later one, which leaves no lag.
    # E[max(Exp 1, Exp 1/2)] = 1 + 2 - 2/3 = 7/3 ms (Ross, ch. 5 - from memory), checked with
    # the light-load allowance of the test above.
    first = run_dual(1, exp_sampler(1.0), exp_sampler(2.0), seed=120, commits=8_000)
    both = run_dual(1, exp_sampler(1.0), exp_sampler(2.0), ack_after="both", seed=120,
                    commits=8_000)
    assert np.array_equal(both.response_ms, first.response_ms + first.lag_ms)
    assert np.all(both.lag_ms == 0.0)
    assert_mean(both.response_ms, 7.0 / 3.0, rounding=0.005)


def test_dual_devices_are_group_commit_queues_on_one_stream():
    # Exact, by construction: device a uses run_open's streams, so with the same seed its
    # durable times are run_open's group-commit responses, commit for commit. DESIGN.md model
    # 5: the slower device coalesces what arrived while it was busy, so it makes fewer,
    # larger flushes instead of queueing every flush twice.
    single = run_open(500, exp_sampler(0.5), mode="group", seed=119, commits=20_000)
    dual = run_dual(500, exp_sampler(0.5), LOGNORMAL_1_10, seed=119, commits=20_000)
    assert np.array_equal(dual.durable_a_ms, single.response_ms)
    assert dual.flushes_b < dual.flushes_a
    assert dual.batch_sizes_b.mean() > dual.batch_sizes_a.mean()

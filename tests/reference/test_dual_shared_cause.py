"""The dual-device log's shared-cause share s in the simulator against the evaluator and a
closed form.

The simulator's rule (commitadvisor/sim/engine.py, ``SharedCause``): a flush of device b
that starts at the same instant as a flush of device a takes, with chance s, a's uniform
(flush time = the profile's quantile of its uniform), otherwise its own. At light load each
commit's two responses are then comonotone with chance s, which is the evaluator's
definition (sf_min = (1 - s) sf_a sf_b + s min(sf_a, sf_b)); under load fewer commits find
both writers idle, so the two can part.

Tolerances: the simulator's mean carries its own standard error (4 standard errors allowed,
Z = 4 as in test_simulator_vs_simpy.py); the evaluator is held to 3 % on means and 5 % on
p99s against the simulator (the project's agreement goal for the evaluator; the
simulator's standard error of the mean is about 0.3 % here and its p99 within 0.6 %).
"""

from __future__ import annotations

import pytest

from commitadvisor.evaluate import evaluate
from commitadvisor.simulate import simulate_case
from tests.reference.test_simulator_vs_simpy import _case

Z = 4.0
A = {"latency": {"normal": {"kind": "lognormal", "p50_ms": 1.0, "p99_ms": 10.0}}}
B = {"latency": {"normal": {"kind": "lognormal", "p50_ms": 0.5, "p99_ms": 4.0}}}


def _dual(rate_per_s: float, ack_after: str, share: float, a=A, b=B):
    return _case({"commit_rate_per_s": rate_per_s},
                 [{"kind": "dual_device", "devices": ["a", "b"], "ack_after": ack_after,
                   "shared_cause_share": share}], a=a, b=b)


def _sim(case, commits: int = 200_000):
    sim = simulate_case(case, seed=7, commits=commits)
    return sim.evaluation.strategies[0].regimes[0], sim.segments[0]


@pytest.mark.parametrize(("share", "mean_ms"), [(0.0, 2 / 3), (0.5, 5 / 6), (1.0, 1.0)])
def test_light_load_first_ack_mixes_independent_and_comonotone_minima(share, mean_ms):
    # a ~ Exp(mean 1 ms), b ~ Exp(mean 2 ms). Independent: min ~ Exp(rate 1.5), mean 2/3
    # (Ross, Introduction to Probability Models, ch. 5 - from memory). Comonotone:
    # Q_a(u) = -ln(1-u) < Q_b(u) = -2 ln(1-u), so min = T_a, mean 1. With share s the mean is
    # (1 - s) 2/3 + s. At 2 commits/s a flush finds a writer busy with chance under 0.5 %,
    # which moves the mean by at most 0.5 %: allowed beside the statistical error.
    case = _dual(2.0, "first", share,
                 a={"latency": {"normal": {"kind": "exponential", "mean_ms": 1.0}}},
                 b={"latency": {"normal": {"kind": "exponential", "mean_ms": 2.0}}})
    r, seg = _sim(case, commits=100_000)
    assert abs(r.ack_mean_ms - mean_ms) <= Z * seg.ack_mean_se_ms + 0.005 * mean_ms, \
        (r.ack_mean_ms, mean_ms)


# Commit rates at which the evaluator's writer busy share (the larger of the two devices')
# is 0.2 and 0.6 for devices A and B; checked below against both models.
RATES_PER_S = {0.2: 127.6, 0.6: 511.5}
TOLERANCE = {"ack_mean": 0.03, "ack_p99": 0.05, "loss_window_mean": 0.03,
             "loss_window_p99": 0.05}
_cache: dict[float, tuple] = {}


def _pair(busy: float):
    if busy not in _cache:
        case = _dual(RATES_PER_S[busy], "first", 0.5)
        r, seg = _sim(case)
        _cache[busy] = (r, seg, evaluate(case).strategies[0].regimes[0])
    return _cache[busy]


def _figure(res, name: str) -> float:
    loss = res.exposure("device_loss")
    return {"ack_mean": res.ack_mean_ms, "ack_p99": res.ack_p99_ms,
            "loss_window_mean": loss.window_mean_ms, "loss_window_p99": loss.window_p99_ms}[name]


def _known(reason: str):
    return pytest.mark.xfail(strict=True, reason="known limit listed in the README (the "
                             "evaluator applies the share at any load; seed 7, evaluator vs "
                             "simulator): " + reason)


@pytest.mark.parametrize("busy", [0.2, 0.6])
def test_both_models_run_at_the_intended_writer_busy_share(busy):
    r, seg, e = _pair(busy)
    assert e.writer_utilisation == pytest.approx(busy, abs=0.005)
    assert r.writer_utilisation == pytest.approx(busy, abs=0.01)
    assert seg.ack_mean_se_ms < 0.005 * r.ack_mean_ms  # the 3 % is not eaten by noise


@pytest.mark.parametrize(("busy", "name"), [
    (0.2, "ack_mean"), (0.2, "ack_p99"), (0.2, "loss_window_mean"),
    pytest.param(0.2, "loss_window_p99", marks=_known("10.61 vs 11.28 ms (-5.9 %)")),
    pytest.param(0.6, "ack_mean", marks=_known("0.903 vs 0.863 ms (+4.6 %)")),
    pytest.param(0.6, "ack_p99", marks=_known("4.59 vs 4.11 ms (+11.7 %)")),
    pytest.param(0.6, "loss_window_mean", marks=_known("2.15 vs 2.27 ms (-5.3 %)")),
    pytest.param(0.6, "loss_window_p99", marks=_known("13.93 vs 15.43 ms (-9.7 %)")),
])
def test_evaluator_agrees_with_the_simulator_at_share_0_5(busy, name):
    # The evaluator pairs every commit's two responses with chance s at any load; the
    # simulator pairs only flushes that start together, which fewer commits see under load.
    r, _, e = _pair(busy)
    assert _figure(e, name) == pytest.approx(_figure(r, name), rel=TOLERANCE[name])

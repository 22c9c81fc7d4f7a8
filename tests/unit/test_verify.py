"""verify.compare: figure by figure, flags beyond tolerance, agreement within it."""

from __future__ import annotations

import copy
from dataclasses import replace

import pytest

from commitadvisor.case import parse_case
from commitadvisor.results import Saturation
from commitadvisor.simulate import simulate_case
from commitadvisor.verify import Tolerances, compare
from tests.unit.test_simulate import SMALL


@pytest.fixture(scope="module")
def ev():
    d = copy.deepcopy(SMALL)
    d["regimes"] = []
    return simulate_case(parse_case(d, "t"), seed=1, commits=5_000).evaluation


def _with(ev, strategy: str, **changes):
    st = ev.strategy(strategy)
    reg = replace(st.regimes[0], **changes)
    st2 = replace(st, regimes=(reg,))
    return replace(ev, strategies=tuple(st2 if s.name == strategy else s
                                        for s in ev.strategies))


def test_identical_evaluations_agree(ev):
    c = compare(ev, ev)
    assert c.agrees and c.rows and c.seed == 1
    assert all(r.relative_difference in (0.0, None) for r in c.rows)
    assert "agree" in c.summary()


def test_a_mean_off_by_more_than_three_percent_is_flagged(ev):
    base = ev.strategy("sync").regimes[0].ack_mean_ms
    near = compare(ev, _with(ev, "sync", ack_mean_ms=base * 1.02))
    far = compare(ev, _with(ev, "sync", ack_mean_ms=base * 1.04))
    assert near.agrees
    flagged = [(r.strategy, r.regime, r.figure) for r in far.flagged]
    assert flagged == [("sync", "normal", "ack_mean_ms")]
    row = far.flagged[0]
    assert row.relative_difference == pytest.approx(0.04) and row.tolerance == "3 %"


def test_p99_tolerance_and_the_floor(ev):
    base = ev.strategy("sync").regimes[0].ack_p99_ms
    assert compare(ev, _with(ev, "sync", ack_p99_ms=base * 1.045)).agrees
    assert not compare(ev, _with(ev, "sync", ack_p99_ms=base * 1.06)).agrees
    # two near-zero figures never flag: the floor is 5 microseconds
    tiny = compare(_with(ev, "lazy", ack_mean_ms=0.001), _with(ev, "lazy", ack_mean_ms=0.003))
    assert tiny.agrees
    strict = Tolerances(floor_ms=0.0)
    assert not compare(_with(ev, "lazy", ack_mean_ms=0.001),
                       _with(ev, "lazy", ack_mean_ms=0.003), strict).agrees


def test_saturated_on_one_side_only_is_flagged(ev):
    sat = Saturation("cpu", 100.0, 800.0, 700.0, None, "saturated")
    c = compare(ev, _with(ev, "sync", saturation=sat))
    rows = [r for r in c.flagged if r.figure == "saturated"]
    assert rows and "simulated says saturated" in rows[0].note


def test_utilisation_is_compared_in_absolute_terms(ev):
    u = ev.strategy("sync").regimes[0].writer_utilisation
    assert compare(ev, _with(ev, "sync", writer_utilisation=u + 0.015)).agrees
    c = compare(ev, _with(ev, "sync", writer_utilisation=u + 0.03))
    assert [r.figure for r in c.flagged] == ["writer_utilisation"]


def test_a_flagged_mean_within_the_simulations_noise_says_so_and_stays_flagged(ev):
    r0 = ev.strategy("sync").regimes[0]
    off = _with(ev, "sync", ack_mean_ms=r0.ack_mean_ms * 1.05)
    key = ("sync", r0.regime)
    noisy = compare(off, ev, noise={key: 0.02})  # 5 % apart, standard error 2 %
    row = next(r for r in noisy.flagged if r.figure == "ack_mean_ms")
    assert row.flagged and "standard errors" in row.note
    quiet = compare(off, ev, noise={key: 0.005})  # 5 % is ten standard errors
    row = next(r for r in quiet.flagged if r.figure == "ack_mean_ms")
    assert row.flagged and row.note == ""


def test_mean_noise_reads_the_segments_standard_errors():
    from commitadvisor.verify import mean_noise

    d = copy.deepcopy(SMALL)
    d["regimes"] = []
    sim = simulate_case(parse_case(d, "t"), seed=2, commits=5_000)
    noise = mean_noise(sim)
    assert noise and all(0 < v < 1 for v in noise.values())
    seg = next(s for s in sim.segments if (s.strategy, s.regime) in noise)
    r = sim.evaluation.strategy(seg.strategy).regime(seg.regime)
    assert noise[(seg.strategy, seg.regime)] == pytest.approx(seg.ack_mean_se_ms / r.ack_mean_ms)

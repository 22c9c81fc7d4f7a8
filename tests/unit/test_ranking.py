"""Ranking: verdict classes first, then the objective, exposure and flushes; stable and
explained; and the advice assembled from hand-made evaluations."""

from __future__ import annotations

import math
from dataclasses import replace

from hypothesis import given, settings
from hypothesis import strategies as st

from commitadvisor.ranking import DEFERRAL, RankInput, build_advice, rank, rank_input
from commitadvisor.rules_file import load_policy_set
from tests.unit.test_policy import (
    cpu_saturation,
    default_evaluation,
    evaluation,
    make_case,
    regime,
    strategy,
    window,
)


def opt(name, verdict="allowed", objective=5.0, crash=0.0, device=math.inf, flushes=100.0,
        position=0):
    return RankInput(name, verdict, objective, "normal" if objective is not None else None,
                     crash, device, flushes, position)


def test_verdict_classes_come_first_whatever_the_objective():
    r = rank([opt("slow_ok", objective=900.0, position=0),
              opt("fast_banned", "not_allowed", objective=0.1, position=1),
              opt("mid_signoff", "needs_signoff", objective=1.0, position=2)])
    assert [x.name for x in r] == ["slow_ok", "mid_signoff", "fast_banned"]
    assert [x.rank for x in r] == [1, 2, 3]
    assert r[1].explanation.startswith("first of the options that are needs sign-off")


def test_objective_then_exposure_then_flushes_then_case_order():
    r = rank([
        opt("e", objective=5.0, crash=0.0, device=10.0, flushes=50.0, position=0),
        opt("a", objective=2.0, position=1),
        opt("d", objective=5.0, crash=0.0, device=10.0, flushes=50.0, position=2),
        opt("c", objective=5.0, crash=0.0, device=10.0, flushes=20.0, position=3),
        opt("b", objective=5.0, crash=0.0, device=5.0, position=4),
        opt("f", objective=5.0, crash=3.0, position=5),
    ])
    assert [x.name for x in r] == ["a", "b", "c", "e", "d", "f"]
    words = {x.name: x.explanation for x in r}
    assert "5.00 ms" in words["b"] and "against 2.00 ms" in words["b"]
    assert "loss of a device" in words["c"] and "5.00 ms" in words["c"]
    assert "log flushes" in words["e"] and "50.0/s" in words["e"]
    assert "kept in the case's order" in words["d"]
    assert "a crash can take commits" in words["f"]


def test_saturated_options_come_last_in_their_class():
    r = rank([opt("sat", objective=None, position=0), opt("slow", objective=1e4, position=1)])
    assert [x.name for x in r] == ["slow", "sat"]
    assert "saturated" in r[1].explanation


def test_ranking_is_stable_for_ties():
    options = [opt(f"s{i}", position=i) for i in range(6)]
    assert [x.name for x in rank(options)] == [f"s{i}" for i in range(6)]
    assert [x.name for x in rank(list(reversed(options)))] == [f"s{i}" for i in range(6)]


_verdict = st.sampled_from(["allowed", "needs_signoff", "not_allowed"])
_ms = st.one_of(st.none(), st.floats(0.01, 1e4, allow_nan=False))
_option = st.tuples(_verdict, _ms, st.sampled_from([0.0, 10.0, 500.0]),
                    st.sampled_from([0.0, 40.0, math.inf]), st.floats(0, 1e4))


@settings(max_examples=150, deadline=None, derandomize=True)
@given(st.lists(_option, min_size=1, max_size=8), st.data())
def test_a_strictly_better_objective_never_lowers_the_rank(options, data):
    inputs = [RankInput(f"s{i}", v, o, "normal", c, d, f, i)
              for i, (v, o, c, d, f) in enumerate(options)]
    i = data.draw(st.integers(0, len(inputs) - 1))
    before = next(x.rank for x in rank(inputs) if x.name == f"s{i}")
    old = inputs[i].objective_ms
    better = data.draw(st.floats(0.0, old if old is not None else 1e5, exclude_max=True,
                                 allow_nan=False))
    improved = list(inputs)
    improved[i] = replace(inputs[i], objective_ms=better)
    after = next(x.rank for x in rank(improved) if x.name == f"s{i}")
    assert after <= before
    # and the ranking stays consistent with the verdicts
    order = [x.verdict for x in rank(improved)]
    assert order == sorted(order, key=["allowed", "needs_signoff", "not_allowed"].index)


def test_rank_input_reads_the_worst_regime_and_exposures():
    sr = default_evaluation().strategy("s_def")
    ri = rank_input(sr, "not_allowed", None, 1)
    assert ri.objective_ms == 0.5 and ri.crash_exposure_ms == 150.0
    assert math.isinf(ri.device_exposure_ms)
    sync = default_evaluation().strategy("s_sync")
    ri = rank_input(sync, "allowed", None, 0)
    assert ri.objective_ms == 40.0 and ri.objective_regime == "burst"
    sat = strategy("s_sync", "synchronous", regime("normal", 3.0),
                   regime("burst", None, saturation=cpu_saturation()))
    assert rank_input(sat, "not_allowed", None, 0).objective_ms is None


def test_advice_on_the_hand_made_evaluation():
    case = make_case()
    advice = build_advice(case, default_evaluation(), load_policy_set())
    names = [o.name for o in advice.options]
    # allowed: s_dual (p99 1.2 ms), s_sync (40 ms); not allowed: s_def (0.5 ms), s_vol (0.8 ms)
    assert names == ["s_dual", "s_sync", "s_def", "s_vol"]
    assert advice.summary == "2 options allowed, 0 need sign-off, 2 not allowed under " \
                             "Cautious baseline"
    assert advice.deferral == DEFERRAL
    dfr = next(o for o in advice.options if o.name == "s_def")
    # per year: 4 process crashes x 5 + 1 host crash x 5 commits on average (window())
    assert dfr.expected_lost_per_year == 25.0
    assert dfr.expected_value_lost_per_year == 250.0
    # host crash: mean 5, p99.9 15 (window() makes it three times the mean), bound 100
    assert (dfr.lost_per_crash_mean, dfr.lost_per_crash_p999, dfr.lost_per_crash_hard_bound) \
        == (5.0, 15.0, 100.0)
    loss = [c for c in dfr.cautions if c.topic == "loss"]
    assert {c.failure for c in loss} == {"process_crash", "host_crash"}
    assert all("on average 5.00 commits" in c.text for c in loss)
    assert any(c.topic == "device_loss" for c in dfr.cautions)
    vol = next(o for o in advice.options if o.name == "s_vol")
    assert any(c.topic == "volatile_cache" for c in vol.cautions)


def test_cautions_name_the_deciding_regime_and_the_case_words():
    case = make_case()
    normal = regime("normal", 0.5, (window("process_crash", 20.0, 2.0, 50.0),
                                    window("host_crash", 20.0, 2.0, 50.0),
                                    window("device_loss", 0.0, 0.0, 0.0)), copies=0)
    burst = regime("burst", 0.5, (window("process_crash", 20.0, 2.0, 50.0),
                                  window("host_crash", 900.0, 30.0, 50.0),
                                  window("device_loss", 0.0, 0.0, 0.0)), copies=0)
    ev = evaluation(strategy("s_def", "deferred", normal, burst, normal))
    advice = build_advice(case, ev, load_policy_set())
    host = next(c for c in advice.options[0].cautions if c.failure == "host_crash")
    assert host.regime == "burst"
    assert "during burst (the nightly copy)" in host.text
    assert "up to 50 acknowledged commits can be lost (the log buffer's bound)" in host.text
    assert "on average 30 commits" in host.text


def test_objectives_that_differ_below_the_shown_precision_do_not_decide():
    # 794.4 and 794.2 ms both show as 794 ms: the flushes decide, and the words say so
    r = rank([opt("a", objective=794.4, flushes=800.0, position=0),
              opt("b", objective=794.2, flushes=500.0, position=1)])
    assert [x.name for x in r] == ["b", "a"]
    assert "same verdict and commit p99 (794 ms)" in r[1].explanation
    assert "800/s log flushes against 500/s" in r[1].explanation

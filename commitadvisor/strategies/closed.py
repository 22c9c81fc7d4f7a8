"""Closed sessions for the strategies whose writer law is written for open arrivals.

N sessions that think for Z and then commit offer a rate X that solves X = N / (Z + R(X))
(the interactive response time law; Lazowska et al., Quantitative System Performance, 1984,
ch. 3), where R(X) is the strategy's mean commit time at rate X. This fixed point is an
approximation: for a heavy-tailed flush it overstates the wait (at most N commits can pile
up behind a slow flush), which is why synchronous commit uses the embedded chain instead.
It is found by bisection below the host's CPU ceiling, so a closed workload slows down
rather than saturating.
"""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["solve_closed_rate", "CLOSED_NOTE"]

CLOSED_NOTE = ("closed sessions: the rate solves X = N / (Z + R(X)) with this strategy's "
               "open-arrival law (an approximation; check it with the simulator)")


def solve_closed_rate(sessions: int, think_ms: float, mean_response_ms: Callable[[float], float],
                      ceiling_per_ms: float | None) -> float:
    """The commit rate (per ms) of N sessions; ``mean_response_ms(x)`` may return inf where
    the rate x cannot be carried."""
    hi = sessions / max(think_ms, 1e-9)
    if ceiling_per_ms is not None:
        hi = min(hi, ceiling_per_ms * (1 - 1e-9))
    lo = 0.0
    for _ in range(30):  # relative precision ~1e-9 of the bracket
        mid = (lo + hi) / 2
        r = mean_response_ms(mid)
        if mid * (think_ms + r) > sessions:
            hi = mid
        else:
            lo = mid
    return lo

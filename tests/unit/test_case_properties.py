"""Property tests: random or mutated case files never produce a traceback."""

from __future__ import annotations

import tomllib
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from commitadvisor.case import parse_case
from commitadvisor.errors import InputError

ROOT = Path(__file__).resolve().parents[2]
BASE = tomllib.loads((ROOT / "cases" / "ledger_backup_burst.toml").read_text())

values = st.one_of(st.none(), st.booleans(), st.integers(-5, 10**6),
                   st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8),
                   st.lists(st.integers(0, 3), max_size=3), st.dictionaries(st.text(max_size=4),
                                                                             st.integers(),
                                                                             max_size=2))


def _paths(d, prefix=()):
    if isinstance(d, dict):
        for k, v in d.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(d, list):
        for i, v in enumerate(d):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


PATHS = list(_paths(BASE))


def _mutate(path, value):
    import copy

    data = copy.deepcopy(BASE)
    node = data
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    return data


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.sampled_from(PATHS), values)
def test_mutated_case_is_valid_or_a_clean_input_error(path, value):
    try:
        parse_case(_mutate(path, value), "mutated.toml")
    except InputError as exc:
        text = exc.render()
        assert text.startswith("mutated.toml")
        assert all(p.message for p in exc.problems)


@settings(max_examples=60, deadline=None)
@given(st.dictionaries(st.text(max_size=10), values, max_size=5))
def test_random_documents_are_rejected_cleanly(doc):
    try:
        parse_case(doc, "random.toml")
    except InputError as exc:
        assert exc.problems

"""The fewest-parts cover search checked against brute force over every choice.

The reference enumerates every choice of one candidate per channel (written
here independently of picker.buyer.partcover) and takes the size of the union of the
chosen part sets; the optimum is the smallest such size, and a candidate can
be in an optimal plan when some optimal choice holds it.
"""

from __future__ import annotations

import itertools

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from picker.buyer.partcover import in_some_cover, min_part_covers, part_classes


def _brute(channels):
    best = None
    union_of = []
    for combo in itertools.product(*channels):
        u = frozenset().union(*combo)
        union_of.append((combo, u))
        best = len(u) if best is None else min(best, len(u))
    useful = [[False] * len(ch) for ch in channels]
    covers = set()
    for combo, u in union_of:
        if len(u) == best:
            covers.add(u)
            for c, cand in enumerate(combo):
                for j, other in enumerate(channels[c]):
                    if other == cand:
                        useful[c][j] = True
    return best, useful, covers


@st.composite
def instances(draw):
    pool = [f"p{i}" for i in range(draw(st.integers(1, 8)))]
    part = st.sampled_from(pool)
    n_ch = draw(st.integers(1, 4))
    chans = []
    for _ in range(n_ch):
        n = draw(st.integers(1, 6))
        chans.append([frozenset(draw(st.lists(part, min_size=1, max_size=3))) for _ in range(n)])
    return chans


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(instances())
def test_cover_search_equals_brute_force(chans):
    best, useful, covers = _brute(chans)
    res = min_part_covers(chans, time_limit=30.0)
    assert res.complete and res.size == res.lower_bound == best
    # every returned cover is one (each channel has a candidate inside it), of size best
    for cov in res.covers:
        assert len(cov) == best
        assert all(any(c <= cov for c in ch) for ch in chans)
    assert set(res.covers) <= covers
    # candidates that can be in an optimal plan: exactly the brute force's
    assert in_some_cover(chans, res) == useful


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(instances())
def test_interchangeable_parts_swap_onto_the_same_candidates(chans):
    for cls in part_classes(chans):
        for p, q in itertools.combinations(cls, 2):
            for ch in chans:
                sets = set(ch)
                for cand in ch:
                    swapped = frozenset(q if x == p else p if x == q else x for x in cand)
                    assert swapped in sets


def test_interchangeable_parts_give_one_cover_profile():
    # channel c can use {x, a_c} or {y, a_c}: x and y are interchangeable, so the
    # two optimal covers {x, a0..a3} and {y, a0..a3} share one profile, and every
    # candidate is in an optimal plan
    chans = [[frozenset({"x", f"a{c}"}), frozenset({"y", f"a{c}"})] for c in range(4)]
    res = min_part_covers(chans)
    assert res.size == 5 and len(res.covers) == 1
    assert ("x", "y") in res.classes
    assert in_some_cover(chans, res) == [[True, True]] * 4
    # parts that sit together in one candidate are not merged (the rule is conservative)
    chans = [[frozenset({f"a{c}", "s"}), frozenset({"x", "y", "z"})] for c in range(4)]
    res = min_part_covers(chans)
    assert res.size == 3 and res.covers == (frozenset({"x", "y", "z"}),)
    assert in_some_cover(chans, res) == [[False, True]] * 4


def test_deadline_reports_a_valid_bound():
    chans = [[frozenset({f"a{c}", f"b{c}"}), frozenset({"x", f"y{c}"})] for c in range(6)]
    res = min_part_covers(chans, time_limit=0.0)
    best, _, _ = _brute(chans)
    assert res.lower_bound <= best  # 7: x plus y0..y5
    assert best == 7

"""kiln.launchers.population_groups: how the population launcher groups sweep points and cuts the
groups into populations.

Project requirement (DEVELOPERS.md, "Sweeps as populations"; no outside source): points that may
share a population (equal population keys) are cut into at most as many balanced populations as there
are worker slots; points with different keys never share one. Every expected split below is worked
out by hand.
"""

import pytest

from kiln.launchers.population_groups import even_chunks, split_points


def test_even_chunks_differ_by_at_most_one_larger_first():
    # 7 = 3 + 2 + 2 (by hand).
    assert even_chunks([0, 1, 2, 3, 4, 5, 6], 3) == [[0, 1, 2], [3, 4], [5, 6]]
    assert even_chunks([4, 9], 2) == [[4], [9]]
    with pytest.raises(ValueError):
        even_chunks([1], 2)


def test_one_group_fills_every_slot_in_balanced_populations():
    # The target_entropy preset's 25 points on 2 cores: 13 + 12.
    populations = split_points(["a"] * 25, 2)
    assert [len(p) for p in populations] == [13, 12]
    assert populations[0] == list(range(13)) and populations[1] == list(range(13, 25))


def test_points_with_other_keys_never_share_a_population():
    keys = ["a", "b", "a", "b", "a", "b"]
    populations = split_points(keys, 2)
    assert sorted(populations) == [[0, 2, 4], [1, 3, 5]]
    for population in populations:
        assert len({keys[i] for i in population}) == 1


def test_spare_slots_go_to_the_largest_group():
    # Groups of 6 and 2 on 4 slots, two spare: the 6 is the largest, cut to 3+3; the 3s are still the
    # largest, so the 6 is cut again, to 2+2+2. With b's 2 that is 4 populations of 2 (by hand).
    keys = ["a"] * 6 + ["b"] * 2
    populations = split_points(keys, 4)
    assert sorted(len(p) for p in populations) == [2, 2, 2, 2]
    assert sorted(populations) == [[0, 1], [2, 3], [4, 5], [6, 7]]


def test_more_groups_than_slots_keeps_one_population_per_group_largest_first():
    keys = ["a", "b", "c", "b", "c", "c"]
    assert split_points(keys, 2) == [[2, 4, 5], [1, 3], [0]]


def test_no_more_populations_than_points():
    assert split_points(["a", "a"], 8) == [[0], [1]]
    assert split_points(["a"], 1) == [[0]]


def test_slots_below_one_are_refused():
    with pytest.raises(ValueError):
        split_points(["a"], 0)


@pytest.mark.parametrize("slots", [1, 2, 3, 5, 8])
def test_every_point_trains_once_and_keys_never_mix(slots):
    # The rules of the docstring, checked on a mixed sweep: 7 "a", 3 "b", 1 "c" (hand-made).
    keys = ["a", "b", "a", "a", "c", "b", "a", "a", "b", "a", "a"]
    populations = split_points(keys, slots)
    assert sorted(i for p in populations for i in p) == list(range(len(keys)))
    assert all(len({keys[i] for i in p}) == 1 for p in populations)
    assert all(p == sorted(p) for p in populations)  # each in sweep order
    assert len(populations) == max(3, min(slots, len(keys)))  # one per group at least, else one per slot
    assert [len(p) for p in populations] == sorted((len(p) for p in populations), reverse=True)

"""Each run rule on sequences that just break it and just do not.

Rules: Western Electric Statistical Quality Control Handbook (1956); Nelson 1984, J. Quality Technology 16(4).
Centre 0, σ 1 throughout, so values are in σ units.
"""

import numpy as np
import pytest

from analysis.errors import ParameterError
from analysis.monitor import NELSON, RULES, WESTERN_ELECTRIC, check_rules


def fired(values, rule):
    return check_rules(np.asarray(values, dtype=float), centre=0.0, sigma=1.0, rules=(rule,))


@pytest.mark.parametrize("rule", ["we1", "nelson1"])
def test_one_beyond_3_sigma(rule):
    v = fired([0, 0.5, 3.01, 0], rule)
    assert [(x.index, x.points) for x in v] == [(2, (2,))]
    assert fired([0, 3.0, -3.0, 0], rule) == ()  # exactly 3σ is not beyond


@pytest.mark.parametrize("rule", ["we2", "nelson5"])
def test_two_of_three_beyond_2_sigma(rule):
    v = fired([0, 2.1, 0.0, 2.2, 0], rule)
    assert [(x.index, x.points) for x in v] == [(3, (1, 3))]
    assert fired([0, 2.1, 0.0, 0.0, 2.2], rule) == ()  # 2 of 4, not 2 of 3
    assert fired([0, 2.1, -2.2, 0.0], rule) == ()  # opposite sides
    assert [x.index for x in fired([-2.5, -2.1, 0], rule)] == [1]


@pytest.mark.parametrize("rule", ["we3", "nelson6"])
def test_four_of_five_beyond_1_sigma(rule):
    v = fired([1.5, 1.2, 0.0, 1.1, 1.3], rule)
    assert [(x.index, x.points) for x in v] == [(4, (0, 1, 3, 4))]
    assert fired([1.5, 1.2, 0.0, 0.0, 1.1, 1.3], rule) == ()
    assert fired([1.5, 1.2, 1.0, 1.1, 0.9], rule) == ()  # exactly 1σ is not beyond


def test_we4_eight_in_a_row_one_side():
    v = fired([0.1] * 8, "we4")
    assert [(x.index, x.points) for x in v] == [(7, tuple(range(8)))]
    assert fired([0.1] * 7 + [-0.1], "we4") == ()
    assert fired([0.1] * 3 + [0.0] + [0.1] * 4, "we4") == ()  # a point on the centre line breaks the run
    assert [x.index for x in fired([-0.2] * 10, "we4")] == [7, 8, 9]  # fires again while the run continues


def test_nelson2_nine_in_a_row_one_side():
    assert [x.index for x in fired([-0.3] * 9, "nelson2")] == [8]
    assert fired([-0.3] * 8, "nelson2") == ()


def test_nelson3_six_points_steadily_increasing_is_five_increases():
    up = [0.0, 0.1, 0.2, 0.3, 0.4, 0.5]
    v = fired(up, "nelson3")
    assert [(x.index, x.points) for x in v] == [(5, tuple(range(6)))]
    assert fired(up[:5], "nelson3") == ()  # 5 points, 4 increases
    assert fired([0.0, 0.1, 0.2, 0.2, 0.3, 0.4], "nelson3") == ()  # a tie breaks the run
    assert [x.index for x in fired(up[::-1], "nelson3")] == [5]


def test_nelson4_fourteen_alternating():
    alt = [0.5 * (-1) ** i for i in range(14)]
    v = fired(alt, "nelson4")
    assert [(x.index, x.points) for x in v] == [(13, tuple(range(14)))]
    assert fired(alt[:13], "nelson4") == ()
    broken = list(alt)
    broken[7] = broken[6] + 0.1  # two increases in a row
    assert fired(broken, "nelson4") == ()


def test_nelson7_fifteen_within_1_sigma():
    assert [x.index for x in fired([0.5, -0.5] * 7 + [0.9], "nelson7")] == [14]
    assert fired([0.5, -0.5] * 7 + [1.0], "nelson7") == ()  # exactly 1σ is not within


def test_nelson8_eight_none_within_1_sigma_both_sides():
    both = [1.5, -1.5] * 4
    assert [x.index for x in fired(both, "nelson8")] == [7]
    assert fired([1.5] * 8, "nelson8") == ()  # all on one side
    assert fired([1.5, -1.5] * 3 + [1.5, 0.5], "nelson8") == ()


def test_selection_ordering_and_sets():
    values = [0.0, 4.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8]
    v = check_rules(values, centre=0.0, sigma=1.0, rules=("we4", "nelson1"))
    assert [(x.rule, x.index) for x in v] == [("nelson1", 1), ("we4", 8), ("we4", 9)]
    assert v[0].description == RULES["nelson1"]
    assert set(WESTERN_ELECTRIC) | set(NELSON) == set(RULES)
    # centre and σ scale the values.
    assert check_rules([10.0, 16.5], centre=10.0, sigma=2.0, rules="we1")[0].index == 1


def test_check_rules_errors():
    with pytest.raises(ParameterError, match=r"rules must be ids from .*got unknown 'we9'"):
        check_rules([1.0], centre=0.0, sigma=1.0, rules=("we9",))
    with pytest.raises(ParameterError, match="sigma must be a finite number > 0; got 0"):
        check_rules([1.0], centre=0.0, sigma=0)

"""Config value checks: each accepts exactly its type and range and refuses anything else in one line
that names the key, repeats the value and says what to set (the rule of DEVELOPERS.md, "Errors").

The expected messages are written out by hand from that rule; the ranges are the checks' own
arguments, chosen in each test.
"""

import math

import pytest

from kiln.config import checks
from kiln.errors import ConfigError


def _refusal(call, *args) -> str:
    with pytest.raises(ConfigError) as info:
        call(*args)
    message = str(info.value)
    assert "\n" not in message
    return message


def test_integer_accepts_the_closed_range_and_refuses_booleans_floats_and_outsiders():
    assert checks.integer(1, "steps", 1, 10) == 1 and checks.integer(10, "steps", 1, 10) == 10
    # 1.7 is not truncated and True is not 1: both are typos, not integers.
    for wrong in (1.7, True, "3", None):
        message = _refusal(checks.integer, wrong, "steps", 1, 10)
        assert message == f"steps must be an integer, got {wrong!r}: set steps=<integer from 1 to 10>"
    assert _refusal(checks.integer, 11, "steps", 1, 10) == (
        "steps must be from 1 to 10, got 11: set steps=<integer from 1 to 10>"
    )


@pytest.mark.parametrize(
    "low_open,high_open,span",
    [(False, False, "[0, 1]"), (True, False, "(0, 1]"), (False, True, "[0, 1)"), (True, True, "(0, 1)")],
)
def test_number_open_and_closed_ends(low_open, high_open, span):
    # Interval notation: a bracket includes its end, a parenthesis leaves it out.
    for end, is_open in ((0.0, low_open), (1.0, high_open)):
        if is_open:
            message = _refusal(checks.number, end, "agent.discount", 0.0, 1.0, low_open, high_open)
            assert message == f"agent.discount must be in {span}, got {end!r}: set agent.discount=<number in {span}>"
        else:
            assert checks.number(end, "agent.discount", 0.0, 1.0, low_open, high_open) == end
    assert checks.number(0.5, "agent.discount", 0.0, 1.0, low_open, high_open) == 0.5


@pytest.mark.parametrize("wrong", [math.nan, math.inf, -math.inf, True, "0.9", None])
def test_number_refuses_non_finite_and_non_numbers(wrong):
    message = _refusal(checks.number, wrong, "agent.discount", 0.0, 1.0, False, True)
    assert message == (
        f"agent.discount must be a finite number in [0, 1), got {wrong!r}: set agent.discount=<number in [0, 1)>"
    )


def test_number_returns_a_float_even_for_an_integer():
    value = checks.number(1, "agent.critic.lr", 0.0, 2.0)
    assert value == 1.0 and type(value) is float


def test_positive_is_the_half_open_interval_up_to_a_million():
    assert checks.positive(1e6, "agent.actor.lr") == 1e6
    assert _refusal(checks.positive, 0.0, "agent.actor.lr") == (
        "agent.actor.lr must be in (0, 1e+06], got 0.0: set agent.actor.lr=<number in (0, 1e+06]>"
    )
    assert "(0, 5]" in _refusal(checks.positive, 6.0, "x", 5.0)


def test_boolean_refuses_words_and_numbers():
    assert checks.boolean(True, "resume") is True and checks.boolean(False, "resume") is False
    for wrong in ("maybe", "true", 1, None):
        assert _refusal(checks.boolean, wrong, "resume") == (
            f"resume must be true or false, got {wrong!r}: set resume=true or resume=false"
        )


def test_choice_lists_every_option():
    assert checks.choice("bar", "log.progress", ("auto", "bar")) == "bar"
    assert _refusal(checks.choice, "spinner", "log.progress", ("auto", "bar", "off")) == (
        "log.progress must be one of auto | bar | off, got 'spinner': set log.progress=<auto | bar | off>"
    )


def test_int_list_checks_length_and_every_entry():
    assert checks.int_list([64, 32], "agent.layer_widths", 1, 100, 3) == (64, 32)
    for wrong in ([], [1, 2, 3, 4], "64", 64):
        assert _refusal(checks.int_list, wrong, "agent.layer_widths", 1, 100, 3) == (
            f"agent.layer_widths must be a list of 1 to 3 integers, got {wrong!r}: set agent.layer_widths=[64,64]"
        )
    # The entry is named by its index, so the user sees which one is wrong.
    assert _refusal(checks.int_list, [64, 0], "agent.layer_widths", 1, 100, 3).startswith(
        "agent.layer_widths[1] must be from 1 to 100, got 0"
    )


def test_increasing_pair():
    assert checks.increasing_pair([-20, 2], "agent.actor.log_std_soft_limits", -100.0, 20.0) == (-20.0, 2.0)
    key = "agent.actor.log_std_soft_limits"
    assert _refusal(checks.increasing_pair, [2, -20], key, -100.0, 20.0) == (
        f"{key} must be [low, high] with low < high, got [2, -20]: swap or widen them"
    )
    assert _refusal(checks.increasing_pair, [1.0], key, -100.0, 20.0) == (
        f"{key} must be a list of two numbers [low, high], got [1.0]: set {key}=[-20,2]"
    )
    assert _refusal(checks.increasing_pair, [-200, 2], key, -100.0, 20.0).startswith(f"{key}[0] must be in [-100, 20]")


def test_long_values_are_shortened_in_the_message():
    # Hand count: the repr of 50 ones is 151 characters; the message keeps the first 37 and "...".
    long = [1] * 50
    message = _refusal(checks.int_list, long, "agent.layer_widths", 1, 100, 3)
    assert f"got {repr(long)[:37]}...:" in message and repr(long) not in message

"""Reading a task's options: the one check of option names, and the finite-number check the options
share. Expected messages are written out by hand from the rule that a task's error is one line naming
the problem and the fix (DEVELOPERS.md, "Adding a task" and "Errors")."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest

from kiln.envs.task_error import TaskError
from kiln.envs.task_options import finite_number, options_from_kwargs


@dataclass(frozen=True)
class KnobOptions:
    width: float = 1.0
    depth: float = 2.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "width", finite_number(self.width, "width"))


def test_known_options_build_the_dataclass_with_defaults_for_the_rest():
    assert options_from_kwargs("kiln/Knob-v0", KnobOptions, {"width": 3}) == KnobOptions(width=3.0, depth=2.0)
    assert options_from_kwargs("kiln/Knob-v0", KnobOptions, {}) == KnobOptions()


def test_unknown_options_are_named_sorted_with_the_known_ones_in_field_order():
    with pytest.raises(TaskError) as info:
        options_from_kwargs("kiln/Knob-v0", KnobOptions, {"zoom": 1, "colour": "red", "width": 2})
    assert str(info.value) == "unknown option(s) colour, zoom for kiln/Knob-v0; its options are width, depth"


def test_the_dataclass_check_still_runs():
    with pytest.raises(TaskError, match="width must be a finite number, got 'wide'; pass e.g. 1.0"):
        options_from_kwargs("kiln/Knob-v0", KnobOptions, {"width": "wide"})


@pytest.mark.parametrize("value,expected", [(3, 3.0), ("2.5", 2.5), (np.float32(0.5), 0.5), (-1e300, -1e300)])
def test_finite_number_accepts_anything_float_takes_that_is_finite(value, expected):
    number = finite_number(value, "stiffness")
    assert number == expected and type(number) is float


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf, True, False, None, "stiff", [1.0], 1j, "1e999"])
def test_finite_number_refuses_the_rest_in_one_line(value):
    # A boolean is an int to Python, but True as a stiffness is a typo; "1e999" reads as inf.
    with pytest.raises(TaskError) as info:
        finite_number(value, "stiffness")
    assert str(info.value) == f"stiffness must be a finite number, got {value!r}; pass e.g. 1.0"

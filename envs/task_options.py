"""Reading a task's options: the one check of option names, and number checks the options share.

Every Kiln task takes its options from a frozen dataclass; ``options_from_kwargs`` turns keyword
arguments into that dataclass, refusing names it does not have in one line that lists the known ones.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any, TypeVar

from kiln.envs.task_error import TaskError

Options = TypeVar("Options")


def options_from_kwargs(task_id: str, options_type: type[Options], kwargs: Mapping[str, Any]) -> Options:
    """Build a task's options from keyword arguments, naming any the task does not have.

    Args:
        task_id: The task's id, for the message.
        options_type: The task's frozen dataclass of options.
        kwargs: The keyword arguments given to ``gymnasium.make`` / ``make_vec``.

    Returns:
        The options (validated by the dataclass itself).

    Raises:
        TaskError: On an unknown option, or a value the dataclass refuses.
    """
    known = [option.name for option in dataclasses.fields(options_type)]
    unknown = sorted(set(kwargs) - set(known))
    if unknown:
        raise TaskError(f"unknown option(s) {', '.join(unknown)} for {task_id}; its options are {', '.join(known)}")
    return options_type(**kwargs)


def finite_number(value: Any, name: str) -> float:
    """``value`` as a finite float.

    Args:
        value: The option's value.
        name: The option's name, for the message.

    Returns:
        float(value).

    Raises:
        TaskError: If the value is not a finite real number (booleans are refused too).
    """
    # bool is an int to Python, but a True stiffness is a typo, not a number.
    try:
        number = math.nan if isinstance(value, bool) else float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not math.isfinite(number):
        raise TaskError(f"{name} must be a finite number, got {value!r}; pass e.g. 1.0")
    return number

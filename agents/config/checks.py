"""Value checks for config entries: type, finiteness and range, each failing with one line.

Every message names the key, the value it got and what to set instead, so a typo on the command
line ends before any folder exists. Booleans must be real booleans (``maybe`` is not true), integers
must be integers (``1.7`` is not truncated to 1), and every number must be finite.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from kiln.errors import ConfigError


def _shown(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def integer(value: Any, path: str, low: int, high: int) -> int:
    """An ``int`` in ``[low, high]`` (booleans and floats refused)."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise ConfigError(f"{path} must be an integer, got {_shown(value)}: set {path}=<integer from {low} to {high}>")
    if not low <= value <= high:
        raise ConfigError(f"{path} must be from {low} to {high}, got {_shown(value)}: set {path}=<integer from {low} to {high}>")
    return value


def number(value: Any, path: str, low: float, high: float, low_open: bool = False, high_open: bool = False) -> float:
    """A finite number in the interval between ``low`` and ``high`` (open ends as flagged)."""
    span = f"{'(' if low_open else '['}{low:g}, {high:g}{')' if high_open else ']'}"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(f"{path} must be a finite number in {span}, got {_shown(value)}: set {path}=<number in {span}>")
    below = value <= low if low_open else value < low
    above = value >= high if high_open else value > high
    if below or above:
        raise ConfigError(f"{path} must be in {span}, got {_shown(value)}: set {path}=<number in {span}>")
    return float(value)


def positive(value: Any, path: str, high: float = 1e6) -> float:
    """A finite number in ``(0, high]``."""
    return number(value, path, 0.0, high, low_open=True)


def boolean(value: Any, path: str) -> bool:
    """``true`` or ``false`` (a string such as ``maybe`` is refused, not read as true)."""
    if not isinstance(value, bool):
        raise ConfigError(f"{path} must be true or false, got {_shown(value)}: set {path}=true or {path}=false")
    return value


def choice(value: Any, path: str, options: Sequence[str]) -> str:
    """One of ``options``."""
    if value not in options:
        listed = " | ".join(options)
        raise ConfigError(f"{path} must be one of {listed}, got {_shown(value)}: set {path}=<{listed}>")
    return str(value)


def int_list(value: Any, path: str, low: int, high: int, max_length: int) -> tuple[int, ...]:
    """A non-empty list of at most ``max_length`` integers in ``[low, high]``."""
    if not isinstance(value, (list, tuple)) or not 1 <= len(value) <= max_length:
        raise ConfigError(
            f"{path} must be a list of 1 to {max_length} integers, got {_shown(value)}: set {path}=[64,64]"
        )
    return tuple(integer(v, f"{path}[{i}]", low, high) for i, v in enumerate(value))


def increasing_pair(value: Any, path: str, low: float, high: float) -> tuple[float, float]:
    """Two finite numbers ``[a, b]`` with ``low ≤ a < b ≤ high``."""
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise ConfigError(f"{path} must be a list of two numbers [low, high], got {_shown(value)}: set {path}=[-20,2]")
    a, b = (number(v, f"{path}[{i}]", low, high) for i, v in enumerate(value))
    if not a < b:
        raise ConfigError(f"{path} must be [low, high] with low < high, got {_shown(list(value))}: swap or widen them")
    return a, b

"""Which sweep points train together: points that can share a population, split into balanced parts.

Pure functions of the points' population keys (``kiln.training.population.population_key``), so the
launcher's grouping can be tested without training anything.
"""

from __future__ import annotations

import math
from collections.abc import Sequence


def even_chunks(items: Sequence[int], parts: int) -> list[list[int]]:
    """``items`` cut into ``parts`` consecutive pieces whose sizes differ by at most one (larger first).

    Raises:
        ValueError: If ``parts`` is not between 1 and ``len(items)``.
    """
    if not 1 <= parts <= len(items):
        raise ValueError(f"cannot cut {len(items)} items into {parts} non-empty pieces")
    size, extra = divmod(len(items), parts)
    pieces, start = [], 0
    for i in range(parts):
        end = start + size + (1 if i < extra else 0)
        pieces.append(list(items[start:end]))
        start = end
    return pieces


def split_points(keys: Sequence[str], slots: int) -> list[list[int]]:
    """Group sweep points by population key and cut the groups into at most ``slots`` populations.

    Points with equal keys may share a population; points with different keys never do. Each group
    gets one population, and the slots left over go one at a time to the group whose populations are
    largest at that moment, so that the populations end up as even as the groups allow. When there
    are more groups than slots, every group is one population (they cannot merge) and the launcher
    runs them ``slots`` at a time.

    Args:
        keys: One population key per sweep point, in the sweep's order.
        slots: How many populations may run at once (worker processes), at least 1.

    Returns:
        The populations as lists of point indices (each in sweep order), largest first, so that a
        pool running them ``slots`` at a time starts the longest work first.

    Raises:
        ValueError: If ``slots`` is below 1.
    """
    if slots < 1:
        raise ValueError(f"slots must be at least 1, got {slots}")
    groups: dict[str, list[int]] = {}
    for index, key in enumerate(keys):
        groups.setdefault(key, []).append(index)
    members = list(groups.values())
    parts = [1] * len(members)
    for _ in range(slots - len(members)):
        # The group whose populations are largest now (a group of single members cannot be cut).
        sizes = [math.ceil(len(g) / p) if p < len(g) else 0 for g, p in zip(members, parts)]
        largest = max(range(len(members)), key=lambda g: sizes[g])
        if sizes[largest] <= 1:
            break
        parts[largest] += 1
    populations = [chunk for group, p in zip(members, parts) for chunk in even_chunks(group, p)]
    return sorted(populations, key=len, reverse=True)  # sorted() is stable: equal sizes keep sweep order

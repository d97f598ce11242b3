"""Which task to build: its id, its options and its time limit, as one value.

A saved policy's ``spec.json`` stores the same three fields under ``env`` (see ``TaskSpec.to_record``),
so evaluation rebuilds exactly the task a policy was trained on.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from kiln.envs.task_error import TaskError

_RECORD_KEYS = ("id", "kwargs", "max_episode_steps")


@dataclass(frozen=True)
class TaskSpec:
    """A task to build.

    Attributes:
        id: A registered Gymnasium id (``Pendulum-v1``, ``kiln/FiringHold-v0``), or ``module:id`` for a
            task that ``module`` registers when imported.
        kwargs: The task's options, passed to its constructor (the spec keeps its own copy).
        max_episode_steps: Time limit; ``None`` keeps the registered one.
    """

    id: str
    kwargs: Mapping[str, Any] = field(default_factory=dict)
    max_episode_steps: int | None = None

    def __post_init__(self) -> None:
        """Check the fields and copy the options.

        Raises:
            TaskError: If the id is empty, the options are not a mapping with string keys, or the time
                limit is not a positive integer or None.
        """
        if not isinstance(self.id, str) or not self.id:
            raise TaskError(f"the task id must be a non-empty string, got {self.id!r}; pass e.g. Pendulum-v1")
        if not isinstance(self.kwargs, Mapping) or not all(isinstance(key, str) for key in self.kwargs):
            raise TaskError(
                f"the options of {self.id} must be a mapping of names to values, got {self.kwargs!r}; "
                "pass e.g. {} or {'stiffness': 4.0}"
            )
        limit = self.max_episode_steps
        if limit is not None and (isinstance(limit, bool) or not isinstance(limit, int) or limit < 1):
            raise TaskError(
                f"max_episode_steps of {self.id} must be an integer >= 1 or null (keep the registered "
                f"limit), got {limit!r}"
            )
        # A copy of its own, so a caller's later edits to its dict cannot change the spec (a plain dict
        # rather than a read-only view, so the spec still copies and pickles like any other value).
        object.__setattr__(self, "kwargs", dict(self.kwargs))

    @classmethod
    def from_record(cls, record: Mapping[str, Any]) -> TaskSpec:
        """Read the JSON form written by ``to_record`` (a saved policy's ``env`` block).

        Args:
            record: ``{"id": ..., "kwargs": {...} or null, "max_episode_steps": int or null}``; only
                ``id`` is required.

        Returns:
            The spec.

        Raises:
            TaskError: If the record is not a mapping, lacks ``id``, has other keys, or holds bad values.
        """
        if not isinstance(record, Mapping) or "id" not in record:
            raise TaskError(f"a task record needs at least an id, got {record!r}; write it with TaskSpec.to_record")
        unknown = sorted(set(record) - set(_RECORD_KEYS))
        if unknown:
            raise TaskError(f"a task record has unknown key(s) {unknown}; known keys are {list(_RECORD_KEYS)}")
        return cls(record["id"], record.get("kwargs") or {}, record.get("max_episode_steps"))

    def to_record(self) -> dict[str, Any]:
        """The JSON form: ``{"id", "kwargs", "max_episode_steps"}`` with plain containers.

        Returns:
            A dict that ``json.dumps`` accepts when the options are JSON values.
        """
        return {"id": self.id, "kwargs": dict(self.kwargs), "max_episode_steps": self.max_episode_steps}

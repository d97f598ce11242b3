"""CarDock: push a kiln car along its rail and bring it to rest in the dock (a true terminal state).

Why this task: FiringHold never terminates (episodes only hit the time limit) and DamperTrim always
terminates after one step, so neither checks that an agent treats the two ways an episode ends
differently. Here an episode ends *terminated* at a state-dependent step when the car docks (no future
exists, so the critic target must not bootstrap), or *truncated* by the time limit if it has not docked
(the future still exists, so the target must keep bootstrapping). Every step costs, so getting either
rule wrong shows up as a biased value near the dock or late in an episode.

Dynamics (semi-implicit Euler, step dt), state (position p, velocity v), action u in [-1, 1]:

    v' = v + dt (push_gain u - friction v)
    p' = p + dt v'
    if p' leaves [0, rail_length]: p' is clipped to the rail end and v' = 0 (the buffer stop).
    reward = -step_cost - effort_cost u^2, plus dock_bonus on docking,
    docked (terminated) when |p' - dock_position| <= dock_tolerance and |v'| <= dock_speed.

The car starts at rest at p ~ U(start_low, start_high). Observation: (p, v).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
from gymnasium import spaces

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError
from kiln.envs.task_options import finite_number


@dataclass(frozen=True)
class CarDockOptions:
    """CarDock's options (SI-like scaled units: metres, seconds).

    Attributes:
        dt: Time step, > 0.
        push_gain: Acceleration per unit action, > 0.
        friction: Velocity damping rate, >= 0 (with dt * friction < 1).
        rail_length: Rail from 0 to rail_length, > 0.
        dock_position: Dock centre, inside the rail.
        dock_tolerance: Half-width of the dock, > 0.
        dock_speed: Largest speed at which the car can dock, > 0.
        start_low: Lower end of the start interval.
        start_high: Upper end of the start interval (start_low <= start_high, inside the rail).
        step_cost: Cost per step, >= 0.
        effort_cost: Cost per unit squared action, >= 0.
        dock_bonus: Reward on docking.
    """

    dt: float = 0.1
    push_gain: float = 1.0
    friction: float = 0.2
    rail_length: float = 2.0
    dock_position: float = 1.5
    dock_tolerance: float = 0.05
    dock_speed: float = 0.2
    start_low: float = 0.0
    start_high: float = 0.5
    step_cost: float = 0.1
    effort_cost: float = 0.01
    dock_bonus: float = 10.0

    def __post_init__(self) -> None:
        """Validate and store every option as a float.

        Raises:
            TaskError: On an option outside its range (the message names it and the fix).
        """
        for option in fields(self):
            object.__setattr__(self, option.name, finite_number(getattr(self, option.name), option.name))
        for name in ("dt", "push_gain", "rail_length", "dock_tolerance", "dock_speed"):
            if getattr(self, name) <= 0:
                raise TaskError(f"{name} must be > 0, got {getattr(self, name)}; pass a positive number")
        for name in ("friction", "step_cost", "effort_cost"):
            if getattr(self, name) < 0:
                raise TaskError(f"{name} must be >= 0, got {getattr(self, name)}; pass a non-negative number")
        if self.dt * self.friction >= 1:
            raise TaskError(
                f"dt * friction must be < 1 (got {self.dt * self.friction}); lower dt or friction"
            )
        if not 0 <= self.dock_position <= self.rail_length:
            raise TaskError(
                f"dock_position must lie in [0, rail_length], got {self.dock_position}; move it onto the rail"
            )
        if not 0 <= self.start_low <= self.start_high <= self.rail_length:
            raise TaskError(
                "need 0 <= start_low <= start_high <= rail_length, "
                f"got ({self.start_low}, {self.start_high}); fix the start interval"
            )


class CarDockDynamics(BatchedDynamics):
    """Batched CarDock dynamics."""

    options_type = CarDockOptions
    state_size = 2

    def __init__(self, options: CarDockOptions) -> None:
        """Build spaces from the options.

        Args:
            options: Task parameters.
        """
        super().__init__(options)
        self.observation_space = spaces.Box(
            low=np.array([0.0, -np.inf], dtype=np.float32),
            high=np.array([options.rail_length, np.inf], dtype=np.float32),
            dtype=np.float32,
        )
        self.action_space = spaces.Box(-1.0, 1.0, shape=(1,), dtype=np.float32)

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        """At rest, p ~ U(start_low, start_high)."""
        c = self.options
        positions = rng.uniform(c.start_low, c.start_high, size=count)
        return np.stack([positions, np.zeros(count)], axis=1)

    def advance(
        self, states: np.ndarray, actions: np.ndarray, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """One semi-implicit Euler step with buffer stops; terminate on docking."""
        c = self.options
        push = actions[:, 0]
        velocity = states[:, 1] + c.dt * (c.push_gain * push - c.friction * states[:, 1])
        position = states[:, 0] + c.dt * velocity
        stopped = (position < 0.0) | (position > c.rail_length)
        position = np.clip(position, 0.0, c.rail_length)
        velocity = np.where(stopped, 0.0, velocity)
        docked = (np.abs(position - c.dock_position) <= c.dock_tolerance) & (np.abs(velocity) <= c.dock_speed)
        rewards = -c.step_cost - c.effort_cost * push**2 + np.where(docked, c.dock_bonus, 0.0)
        return np.stack([position, velocity], axis=1), rewards, docked

    def observe(self, states: np.ndarray) -> np.ndarray:
        """Observation (p, v)."""
        return states.astype(np.float32)

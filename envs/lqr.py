"""FiringHold: hold a kiln's chamber temperature at its firing set point (linear-quadratic, noisy).

State x = (chamber temperature deviation, wall temperature deviation) from the set point, in scaled
units; action u = burner trim. The chamber exchanges heat with its wall and the surroundings, the
burner heats the chamber only, and draughts and fuel-pressure ripple act as Gaussian process noise:

    x_{t+1} = A x_t + B u_t + w_t,   w_t ~ N(0, W),
    r_t     = -(x_t' Q x_t + u_t' R u_t)        (cost of the state the action was taken in)

so the reward belongs to the pre-transition state x_t, matching the Riccati solution in
``kiln.envs.lqr_solution``. The task never terminates; episodes end only by the registered time limit.
Its exact maximum-entropy solution is known in closed form, which is why Kiln ships it.

Every matrix can be replaced through keyword arguments (1-D or n-D state, any number of inputs).
The action Box is [-action_bound, action_bound] (default 10), chosen wide enough that the optimal
policy is almost never clipped, so the closed form (which ignores clipping) is the task's exact answer;
see DEFAULT_ACTION_BOUND for the numbers. Actions outside the Box are clipped, as an actuator saturates.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from gymnasium import spaces
from numpy.typing import ArrayLike

from kiln.envs.task_base import BatchedDynamics
from kiln.envs.task_error import TaskError
from kiln.envs.task_options import finite_number

# Default plant: chamber relaxes to ambient (0.85) and gains from a warmer wall (0.10); the wall
# follows the chamber slowly (0.05, 0.93). Eigenvalues 0.97 and 0.81: stable without control, so an
# untrained agent's random actions cannot make the state run away.
DEFAULT_STATE_MATRIX = ((0.85, 0.10), (0.05, 0.93))
DEFAULT_INPUT_MATRIX = ((0.5,), (0.0,))
DEFAULT_STATE_COST = ((1.0, 0.0), (0.0, 0.5))
DEFAULT_INPUT_COST = ((0.1,),)
DEFAULT_NOISE_COVARIANCE = ((0.02, 0.0), (0.0, 0.005))
# Wide on purpose. With the defaults, any discount <= 0.999 and alpha <= 1, the optimal burner trim is
# N(-Kx, Sigma) with K <= (1.30, 0.42) and Sigma^(1/2) <= 1.16; for |x_i| <= 3 (three start standard
# deviations) the mean stays within 5.2, so the bound of 10 is over 4 standard deviations away and
# clipping almost never matters (at alpha = 0.1 none of the 4 million actions sampled in the Monte
# Carlo test is clipped).
# A wide bound also keeps a squashed-Gaussian actor in the near-linear part of tanh, where it can
# represent the Gaussian optimum; its log-density must then include the log(10) of the rescaling.
DEFAULT_ACTION_BOUND = 10.0


def _as_matrix(value: ArrayLike, name: str, diagonal_allowed: bool, size: int = 1) -> np.ndarray:
    """Scalar -> multiple of the size x size identity; vector -> diagonal (cost/covariance) or column."""
    try:
        array = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise TaskError(f"{name} must be a number or a (nested) list of numbers, got {value!r}") from None
    if array.ndim == 0:
        return array * np.eye(size)
    if array.ndim == 1:
        return np.diag(array) if diagonal_allowed else array.reshape(-1, 1)
    if array.ndim == 2:
        return array
    raise TaskError(
        f"{name} must be a scalar, vector or matrix, got {array.ndim} dimensions; pass a 2-D array"
    )


def _check_symmetric(matrix: np.ndarray, name: str, size: int, strictly_positive: bool) -> None:
    """Raise unless matrix is a size x size symmetric positive (semi-)definite matrix."""
    if matrix.shape != (size, size):
        raise TaskError(
            f"{name} must have shape ({size}, {size}), got {matrix.shape}; match the state/action size"
        )
    if not np.allclose(matrix, matrix.T, rtol=0.0, atol=1e-12):
        raise TaskError(f"{name} must be symmetric; pass (M + M.T) / 2")
    smallest = float(np.min(np.linalg.eigvalsh(matrix)))
    if strictly_positive and smallest <= 0:
        raise TaskError(
            f"{name} must be positive definite (smallest eigenvalue {smallest:.3g}); add a positive diagonal"
        )
    if not strictly_positive and smallest < -1e-12:
        raise TaskError(
            f"{name} must be positive semi-definite (smallest eigenvalue {smallest:.3g}); fix the matrix"
        )


@dataclass(frozen=True)
class LinearQuadraticModel:
    """A noisy linear plant with quadratic cost: x' = A x + B u + w, w ~ N(0, W), r = -(x'Qx + u'Ru).

    Shorthands: a scalar A gives a one-state plant; a scalar B gives a 1x1 input matrix and a vector B a
    single-input column; a scalar Q, R or W means that multiple of the identity, a vector its diagonal.

    Attributes:
        state_matrix: A, shape (n, n).
        input_matrix: B, shape (n, m).
        state_cost: Q, symmetric positive semi-definite, shape (n, n).
        input_cost: R, symmetric positive definite, shape (m, m).
        noise_covariance: W, symmetric positive semi-definite, shape (n, n).
        start_std: Start states are drawn from N(0, start_std^2 I).
        action_bound: Actions are clipped to [-action_bound, action_bound] in every input.
    """

    state_matrix: np.ndarray = field(default_factory=lambda: np.array(DEFAULT_STATE_MATRIX))
    input_matrix: np.ndarray = field(default_factory=lambda: np.array(DEFAULT_INPUT_MATRIX))
    state_cost: np.ndarray = field(default_factory=lambda: np.array(DEFAULT_STATE_COST))
    input_cost: np.ndarray = field(default_factory=lambda: np.array(DEFAULT_INPUT_COST))
    noise_covariance: np.ndarray = field(default_factory=lambda: np.array(DEFAULT_NOISE_COVARIANCE))
    start_std: float = 1.0
    action_bound: float = DEFAULT_ACTION_BOUND

    def __post_init__(self) -> None:
        """Normalise shapes (scalars and diagonals are accepted) and validate.

        Raises:
            TaskError: If shapes disagree, a cost/covariance is not symmetric (semi-)definite, or a
                scale is not positive.
        """
        a = _as_matrix(self.state_matrix, "state_matrix", diagonal_allowed=False)
        n = a.shape[0]
        if a.shape != (n, n) or not np.all(np.isfinite(a)):
            raise TaskError(
                f"state_matrix must be square and finite, got shape {a.shape}; pass an (n, n) array"
            )
        b = _as_matrix(self.input_matrix, "input_matrix", diagonal_allowed=False)
        if b.shape[0] != n or not np.all(np.isfinite(b)):
            raise TaskError(
                f"input_matrix must have shape ({n}, m) and be finite, got {b.shape}; pass one row per state"
            )
        m = b.shape[1]
        q = _as_matrix(self.state_cost, "state_cost", diagonal_allowed=True, size=n)
        r = _as_matrix(self.input_cost, "input_cost", diagonal_allowed=True, size=m)
        w = _as_matrix(self.noise_covariance, "noise_covariance", diagonal_allowed=True, size=n)
        _check_symmetric(q, "state_cost", n, strictly_positive=False)
        _check_symmetric(r, "input_cost", m, strictly_positive=True)
        _check_symmetric(w, "noise_covariance", n, strictly_positive=False)
        start_std = finite_number(self.start_std, "start_std")
        if start_std < 0:
            raise TaskError(f"start_std must be finite and >= 0, got {self.start_std}; pass e.g. 1.0")
        action_bound = finite_number(self.action_bound, "action_bound")
        if action_bound <= 0:
            raise TaskError(f"action_bound must be finite and > 0, got {self.action_bound}; pass e.g. 10.0")
        for name, value in (
            ("state_matrix", a),
            ("input_matrix", b),
            ("state_cost", q),
            ("input_cost", r),
            ("noise_covariance", w),
        ):
            value.setflags(write=False)
            object.__setattr__(self, name, value)
        object.__setattr__(self, "start_std", start_std)
        object.__setattr__(self, "action_bound", action_bound)

    @property
    def state_size(self) -> int:
        """n, the state dimension."""
        return self.state_matrix.shape[0]

    @property
    def action_size(self) -> int:
        """m, the action dimension."""
        return self.input_matrix.shape[1]


class FiringHoldDynamics(BatchedDynamics):
    """Batched FiringHold dynamics for a given ``LinearQuadraticModel`` (the task's options)."""

    options_type = LinearQuadraticModel

    def __init__(self, model: LinearQuadraticModel) -> None:
        """Build spaces from the model.

        Args:
            model: The plant, cost and noise.
        """
        super().__init__(model)
        self.state_size = model.state_size
        self.observation_space = spaces.Box(-np.inf, np.inf, shape=(model.state_size,), dtype=np.float32)
        bound = np.float32(model.action_bound)
        self.action_space = spaces.Box(-bound, bound, shape=(model.action_size,), dtype=np.float32)
        # Noise via a factor L with L L' = W; eigh tolerates singular W (Cholesky would not).
        eigenvalues, eigenvectors = np.linalg.eigh(model.noise_covariance)
        self._noise_factor = eigenvectors * np.sqrt(np.clip(eigenvalues, 0.0, None))

    def sample_start(self, rng: np.random.Generator, count: int) -> np.ndarray:
        """x_0 ~ N(0, start_std^2 I)."""
        return self.options.start_std * rng.standard_normal((count, self.state_size))

    def advance(
        self, states: np.ndarray, actions: np.ndarray, rng: np.random.Generator
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """x' = A x + B u + w; reward -(x'Qx + u'Ru) of the current x; never terminates."""
        m = self.options
        rewards = -(
            np.einsum("bi,ij,bj->b", states, m.state_cost, states)
            + np.einsum("bi,ij,bj->b", actions, m.input_cost, actions)
        )
        noise = rng.standard_normal((states.shape[0], self.state_size)) @ self._noise_factor.T
        next_states = states @ m.state_matrix.T + actions @ m.input_matrix.T + noise
        return next_states, rewards, np.zeros(states.shape[0], dtype=bool)

    def observe(self, states: np.ndarray) -> np.ndarray:
        """The observation is the state itself."""
        return states.astype(np.float32)

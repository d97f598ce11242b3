"""Exact soft dynamic programming for finite MDPs (numpy only).

The exact tabular solver Kiln's learned critics are checked against. Given a transition tensor
``P[s, a, s']``, a reward ``R[s, a]``, a temperature ``alpha`` and either a discount (infinite horizon)
or a horizon (finite, backward pass), it returns the soft Q function, the soft value and the Boltzmann
policy ``pi(a|s) = exp((Q(s, a) - V(s)) / alpha)``.

Two backups over the next state are available through ``backup``:

* ``"expected"`` — the ordinary maximum-entropy backup with the dynamics held fixed:
  ``Q(s, a) = R(s, a) + gamma * sum_s' P(s'|s, a) V(s')``.
* ``"optimistic"`` — the exact-posterior backup, in which inference also "chooses" the next state:
  ``Q(s, a) = R(s, a) + gamma * alpha * log sum_s' P(s'|s, a) exp(V(s') / alpha)``.
  It is risk-seeking: a rare large payoff dominates the log-expectation-exp. Kiln keeps the discount
  outside the log-expectation-exp (a choice; the finite-horizon, undiscounted case is unaffected), which
  keeps the backup a gamma-contraction in the sup norm. With ``alpha = 0`` it becomes
  ``R + gamma * max over reachable s'`` of ``V(s')``.

``alpha = 0`` is allowed and gives ordinary (hard-max) value iteration.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

Backup = Literal["expected", "optimistic"]
_BACKUPS = ("expected", "optimistic")
# Row sums of P may carry rounding from whoever built it; this is far looser than float64 rounding
# and far tighter than any real modelling mistake.
_ROW_SUM_TOLERANCE = 1e-8


@dataclass(frozen=True)
class SoftSolution:
    """Result of discounted soft value iteration.

    Attributes:
        q: Soft Q function, shape (S, A).
        v: Soft value, shape (S,).
        policy: Boltzmann policy exp((q - v) / alpha), shape (S, A); greedy (ties split evenly) when
            alpha is 0.
        iterations: Number of sweeps performed.
        change: Sup-norm change of v in the last sweep.
        error_bound: Guaranteed bound on the sup-norm distance of v to the fixed point,
            discount / (1 - discount) * change.
        converged: Whether error_bound fell to the requested tolerance.
    """

    q: np.ndarray
    v: np.ndarray
    policy: np.ndarray
    iterations: int
    change: float
    error_bound: float
    converged: bool


@dataclass(frozen=True)
class SoftHorizonSolution:
    """Result of the finite-horizon soft backward pass.

    Attributes:
        q: Soft Q function per step, shape (T, S, A); q[t] is the value of acting at step t.
        v: Soft value per step, shape (T + 1, S); v[T] is the terminal value.
        policy: Boltzmann policy per step, shape (T, S, A).
        start_value: v[0, start_state] when a start state was given, else None.
    """

    q: np.ndarray
    v: np.ndarray
    policy: np.ndarray
    start_value: float | None


def log_sum_exp(x: np.ndarray, axis: int = -1, weights: np.ndarray | None = None) -> np.ndarray:
    """Numerically stable log(sum(weights * exp(x))) along one axis.

    Entries with zero weight are ignored entirely (so -inf or huge x there cannot poison the result).

    Args:
        x: Values, any shape.
        axis: Axis to reduce.
        weights: Non-negative weights broadcastable with x; None means all ones.

    Returns:
        The reduced array (the broadcast shape without ``axis``). All-zero weights give -inf.
    """
    x = np.asarray(x, dtype=np.float64)
    if weights is None:
        weights = np.ones_like(x)
    x, weights = np.broadcast_arrays(x, np.asarray(weights, dtype=np.float64))
    live = weights > 0
    # Shift by the largest value that actually contributes, so the largest exp term is exactly 1.
    shift = np.max(np.where(live, x, -np.inf), axis=axis, keepdims=True)
    safe_shift = np.where(np.isfinite(shift), shift, 0.0)
    terms = np.where(live, weights * np.exp(np.where(live, x, 0.0) - safe_shift), 0.0)
    with np.errstate(divide="ignore"):
        total = np.log(np.sum(terms, axis=axis, keepdims=True)) + safe_shift
    return np.squeeze(total, axis=axis)


def soft_maximum(q: np.ndarray, alpha: float, axis: int = -1) -> np.ndarray:
    """Soft value alpha * log sum exp(q / alpha) along ``axis``; the hard max when alpha is 0.

    Args:
        q: Values to soft-maximise.
        alpha: Temperature, >= 0.
        axis: Axis to reduce.

    Returns:
        The reduced array.
    """
    if alpha == 0:
        return np.max(q, axis=axis)
    return alpha * log_sum_exp(np.asarray(q) / alpha, axis=axis)


def boltzmann_policy(q: np.ndarray, v: np.ndarray, alpha: float) -> np.ndarray:
    """Policy exp((q - v) / alpha) over the last axis; greedy with ties split evenly when alpha is 0.

    Args:
        q: Soft Q values, shape (..., A).
        v: Soft values matching q, shape (...,).
        alpha: Temperature, >= 0.

    Returns:
        Action probabilities, shape (..., A), summing to 1 over the last axis.
    """
    if alpha == 0:
        best = np.max(q, axis=-1, keepdims=True)
        # Exact ties are the only ties a hard max can see; a relative slack absorbs rounding noise.
        winners = (q >= best - 1e-12 * (1.0 + np.abs(best))).astype(np.float64)
        return winners / winners.sum(axis=-1, keepdims=True)
    policy = np.exp((q - v[..., None]) / alpha)
    # exp((q - v) / alpha) already sums to 1 up to rounding; renormalise to remove that rounding.
    return policy / policy.sum(axis=-1, keepdims=True)


def _next_state_backup(
    transitions: np.ndarray, v_next: np.ndarray, alpha: float, backup: Backup
) -> np.ndarray:
    """Backup of the next-state value for every (s, a): E[V] or alpha * log E[exp(V / alpha)]."""
    if backup == "expected":
        return transitions @ v_next
    if alpha == 0:
        reachable = transitions > 0
        return np.max(np.where(reachable, v_next[None, None, :], -np.inf), axis=-1)
    return alpha * log_sum_exp(v_next[None, None, :] / alpha, axis=-1, weights=transitions)


def soft_value_iteration(
    transitions: np.ndarray,
    reward: np.ndarray,
    alpha: float,
    discount: float,
    *,
    backup: Backup = "expected",
    tolerance: float = 1e-10,
    max_iterations: int = 100_000,
    initial_v: np.ndarray | None = None,
) -> SoftSolution:
    """Discounted soft value iteration to a guaranteed tolerance.

    Sweeps V <- softmax_a [R + discount * backup(V)] until discount / (1 - discount) times the
    sup-norm change is at most ``tolerance``, which bounds the distance to the fixed point.

    Args:
        transitions: P[s, a, s'], shape (S, A, S), rows summing to 1.
        reward: R[s, a], shape (S, A).
        alpha: Temperature, >= 0 (0 gives ordinary value iteration).
        discount: Discount, 0 <= discount < 1.
        backup: "expected" (fixed dynamics) or "optimistic" (exact posterior, log-expectation-exp).
        tolerance: Required bound on the sup-norm error of V, > 0.
        max_iterations: Sweep budget, >= 1.
        initial_v: Starting V, shape (S,); zeros when None.

    Returns:
        A SoftSolution; ``converged`` is False if the budget ran out first.

    Raises:
        ValueError: If any input is malformed (see the message for the fix).
    """
    transitions, reward = _validate_model(transitions, reward, alpha, backup)
    if not 0.0 <= discount < 1.0:
        raise ValueError(
            f"discount must satisfy 0 <= discount < 1, got {discount}; use soft_backward_pass "
            "for an undiscounted finite horizon"
        )
    if not tolerance > 0:
        raise ValueError(f"tolerance must be > 0, got {tolerance}; pass e.g. 1e-10")
    if int(max_iterations) < 1:
        raise ValueError(f"max_iterations must be >= 1, got {max_iterations}; pass e.g. 100000")
    num_states = reward.shape[0]
    if initial_v is None:
        v = np.zeros(num_states)
    else:
        v = np.asarray(initial_v, dtype=np.float64)
        if v.shape != (num_states,):
            raise ValueError(
                f"initial_v must have shape ({num_states},), got {v.shape}; pass one value per state"
            )

    change = np.inf
    error_bound = np.inf
    iterations = 0
    while iterations < max_iterations:
        q = reward + discount * _next_state_backup(transitions, v, alpha, backup)
        v_new = soft_maximum(q, alpha)
        change = float(np.max(np.abs(v_new - v)))
        v = v_new
        iterations += 1
        # Contraction bound: ||V_k - V*|| <= discount / (1 - discount) * ||V_k - V_{k-1}||.
        error_bound = discount / (1.0 - discount) * change
        if error_bound <= tolerance:
            break
    # Recompute q from the final v so q, v and policy are mutually consistent.
    q = reward + discount * _next_state_backup(transitions, v, alpha, backup)
    v = soft_maximum(q, alpha)
    return SoftSolution(
        q=q,
        v=v,
        policy=boltzmann_policy(q, v, alpha),
        iterations=iterations,
        change=change,
        error_bound=error_bound,
        converged=bool(error_bound <= tolerance),
    )


def soft_backward_pass(
    transitions: np.ndarray,
    reward: np.ndarray,
    alpha: float,
    horizon: int,
    *,
    backup: Backup = "expected",
    discount: float = 1.0,
    terminal_value: np.ndarray | None = None,
    start_state: int | None = None,
) -> SoftHorizonSolution:
    """Finite-horizon soft dynamic programming, backward from the last step.

    For t = T-1 down to 0: Q_t = R + discount * backup(V_{t+1}), V_t = alpha log sum_a exp(Q_t / alpha),
    pi_t = exp((Q_t - V_t) / alpha), with V_T the terminal value.

    Args:
        transitions: P[s, a, s'], shape (S, A, S), rows summing to 1.
        reward: R[s, a], shape (S, A).
        alpha: Temperature, >= 0.
        horizon: Number of decision steps T, >= 1.
        backup: "expected" (fixed dynamics) or "optimistic" (exact posterior).
        discount: Per-step discount, 0 <= discount <= 1 (1 is the usual finite-horizon case).
        terminal_value: V_T, shape (S,); zeros when None.
        start_state: Known start state; its value V_0(start_state) is returned as start_value.

    Returns:
        A SoftHorizonSolution.

    Raises:
        ValueError: If any input is malformed (see the message for the fix).
    """
    transitions, reward = _validate_model(transitions, reward, alpha, backup)
    num_states, num_actions = reward.shape
    if isinstance(horizon, bool) or int(horizon) != horizon or horizon < 1:
        raise ValueError(f"horizon must be an integer >= 1, got {horizon!r}; pass the number of steps")
    horizon = int(horizon)
    if not 0.0 <= discount <= 1.0:
        raise ValueError(f"discount must satisfy 0 <= discount <= 1, got {discount}; pass e.g. 1.0")
    if start_state is not None and not (
        int(start_state) == start_state and 0 <= start_state < num_states
    ):
        raise ValueError(
            f"start_state must be an integer in [0, {num_states}), got {start_state!r}; pass a state index"
        )
    v = np.zeros((horizon + 1, num_states))
    if terminal_value is not None:
        terminal_value = np.asarray(terminal_value, dtype=np.float64)
        if terminal_value.shape != (num_states,):
            raise ValueError(
                f"terminal_value must have shape ({num_states},), got {terminal_value.shape}; "
                "pass one value per state"
            )
        v[horizon] = terminal_value
    q = np.zeros((horizon, num_states, num_actions))
    for t in range(horizon - 1, -1, -1):
        q[t] = reward + discount * _next_state_backup(transitions, v[t + 1], alpha, backup)
        v[t] = soft_maximum(q[t], alpha)
    return SoftHorizonSolution(
        q=q,
        v=v,
        policy=boltzmann_policy(q, v[:horizon], alpha),
        start_value=None if start_state is None else float(v[0, int(start_state)]),
    )


def _validate_model(
    transitions: np.ndarray, reward: np.ndarray, alpha: float, backup: str
) -> tuple[np.ndarray, np.ndarray]:
    """Check shapes, probabilities, temperature and backup name; return float64 copies."""
    transitions = np.asarray(transitions, dtype=np.float64)
    reward = np.asarray(reward, dtype=np.float64)
    if reward.ndim != 2 or reward.shape[0] < 1 or reward.shape[1] < 1:
        raise ValueError(f"reward must have shape (S, A), got {reward.shape}; pass R[s, a]")
    num_states, num_actions = reward.shape
    if transitions.shape != (num_states, num_actions, num_states):
        raise ValueError(
            f"transitions must have shape (S, A, S) = ({num_states}, {num_actions}, {num_states}) "
            f"to match reward, got {transitions.shape}; pass P[s, a, s']"
        )
    if not np.all(np.isfinite(reward)):
        raise ValueError("reward contains NaN or inf; pass finite rewards")
    if not np.all(np.isfinite(transitions)) or np.any(transitions < 0):
        raise ValueError("transitions contain negative, NaN or inf entries; pass probabilities in [0, 1]")
    row_error = np.max(np.abs(transitions.sum(axis=-1) - 1.0))
    if row_error > _ROW_SUM_TOLERANCE:
        raise ValueError(
            f"transition rows P[s, a, :] must sum to 1 (worst row is off by {row_error:.3g}); "
            "normalise each row"
        )
    if not (np.isfinite(alpha) and alpha >= 0):
        raise ValueError(f"alpha must be a finite number >= 0, got {alpha}; use 0 for the hard max")
    if backup not in _BACKUPS:
        raise ValueError(f"backup must be one of {_BACKUPS}, got {backup!r}; pick one of those")
    return transitions, reward

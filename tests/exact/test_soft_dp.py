"""Checks of the exact soft dynamic-programming solver against outside results.

The comparisons with Sutton & Barto's printed v* and the soft-vs-hard bound are rows of the verify
table and are tested in test_solver_checks.py.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import logsumexp, softmax

from kiln.envs.glaze_trial import DECIDE, EXPERIMENTAL, STANDARD, glaze_trial_mdp
from kiln.envs.gridworld import BOOK_DISCOUNT, book_gridworld
from kiln.exact.soft_dp import boltzmann_policy, log_sum_exp, soft_backward_pass, soft_maximum, soft_value_iteration


def test_log_sum_exp_matches_scipy() -> None:
    rng = np.random.default_rng(3)
    x = rng.normal(scale=400.0, size=(6, 7, 5))  # exp overflows float64 without the shift
    weights = rng.uniform(size=(6, 7, 5))
    weights[weights < 0.3] = 0.0
    for axis in (0, 1, 2):
        # Source: scipy.special.logsumexp (with its b= weights) as the reference implementation.
        np.testing.assert_allclose(log_sum_exp(x, axis=axis), logsumexp(x, axis=axis), rtol=1e-13)
        with np.errstate(divide="ignore"):
            expected = logsumexp(x, axis=axis, b=weights)
        np.testing.assert_allclose(log_sum_exp(x, axis=axis, weights=weights), expected, rtol=1e-13)
    # An empty sum is 0 and log 0 = -inf (SciPy returns NaN there, so this one is checked by definition).
    assert log_sum_exp(np.array([1e300, -3.0]), weights=np.zeros(2)) == -np.inf


def test_policy_is_the_boltzmann_policy_of_q() -> None:
    transitions, reward = book_gridworld()
    alpha = 0.5
    result = soft_value_iteration(transitions, reward, alpha=alpha, discount=BOOK_DISCOUNT)
    np.testing.assert_allclose(result.policy.sum(axis=1), 1.0, atol=1e-12)
    # Source: scipy.special.softmax / logsumexp give pi = softmax(Q / alpha), V = alpha logsumexp(Q / alpha).
    np.testing.assert_allclose(result.policy, softmax(result.q / alpha, axis=1), rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(result.v, alpha * logsumexp(result.q / alpha, axis=1), rtol=1e-12)
    # Soft Bellman equation Q = R + gamma P V, evaluated here with plain numpy.
    np.testing.assert_allclose(
        result.q, reward + BOOK_DISCOUNT * np.einsum("sat,t->sa", transitions, result.v), atol=1e-9
    )


def test_tolerance_bounds_distance_to_fixed_point() -> None:
    transitions, reward = book_gridworld()
    tight = soft_value_iteration(transitions, reward, alpha=0.2, discount=BOOK_DISCOUNT, tolerance=1e-12)
    loose = soft_value_iteration(transitions, reward, alpha=0.2, discount=BOOK_DISCOUNT, tolerance=1e-3)
    # Banach fixed-point theorem: ||V_k - V*|| <= gamma / (1 - gamma) ||V_k - V_{k-1}||.
    assert loose.converged and loose.error_bound <= 1e-3
    assert np.max(np.abs(loose.v - tight.v)) <= 1e-3
    assert 1 < loose.iterations < tight.iterations
    # Three sweeps from V = 0 give a 3-step soft value. From the corner (4, 4), A and B are 5+ moves
    # away, so no positive reward is reachable: V_3(corner) <= 3 alpha log 4 = 0.83, while the book's
    # v*(corner) = 11.7 <= V_soft(corner). The budget must therefore end unconverged, 10+ away.
    short = soft_value_iteration(transitions, reward, alpha=0.2, discount=BOOK_DISCOUNT, max_iterations=3)
    assert short.iterations == 3 and not short.converged
    assert short.v[24] <= 3 * 0.2 * math.log(4) + 1e-12
    assert tight.v[24] - short.v[24] > 10.0


def test_backward_pass_matches_hand_arithmetic() -> None:
    # Two states, two actions, deterministic: action a moves to state a. R[0] = [0, 1], R[1] = [2, 0].
    transitions = np.zeros((2, 2, 2))
    transitions[:, 0, 0] = 1.0
    transitions[:, 1, 1] = 1.0
    reward = np.array([[0.0, 1.0], [2.0, 0.0]])
    result = soft_backward_pass(transitions, reward, alpha=1.0, horizon=2, start_state=0)
    e = math.e
    # Hand arithmetic, alpha = 1, terminal value 0:
    # last step t = 1: Q_1 = R, V_1(0) = log(e^0 + e^1) = log(1 + e), V_1(1) = log(e^2 + e^0) = log(1 + e^2).
    np.testing.assert_allclose(result.v[1], [math.log(1 + e), math.log(1 + e**2)], rtol=1e-14)
    # t = 0: Q_0(0, 0) = 0 + log(1 + e), Q_0(0, 1) = 1 + log(1 + e^2),
    #        Q_0(1, 0) = 2 + log(1 + e), Q_0(1, 1) = 0 + log(1 + e^2).
    expected_q0 = [
        [math.log(1 + e), 1 + math.log(1 + e**2)],
        [2 + math.log(1 + e), math.log(1 + e**2)],
    ]
    np.testing.assert_allclose(result.q[0], expected_q0, rtol=1e-14)
    # V_0(0) = log((1 + e) + e (1 + e^2)) = log(1 + 2e + e^3); V_0(1) = log(e^2 (1 + e) + 1 + e^2)
    #        = log(1 + 2e^2 + e^3).
    np.testing.assert_allclose(
        result.v[0], [math.log(1 + 2 * e + e**3), math.log(1 + 2 * e**2 + e**3)], rtol=1e-14
    )
    assert result.start_value == pytest.approx(math.log(1 + 2 * e + e**3), rel=1e-14)
    # pi_0(1 | 0) = e (1 + e^2) / (1 + 2e + e^3).
    assert result.policy[0, 0, 1] == pytest.approx(e * (1 + e**2) / (1 + 2 * e + e**3), rel=1e-13)
    np.testing.assert_allclose(result.policy.sum(axis=-1), 1.0, atol=1e-14)
    # Hard limit: V_1 = max R = [1, 2]; V_0(0) = max(0 + 1, 1 + 2) = 3, V_0(1) = max(2 + 1, 0 + 2) = 3.
    hard = soft_backward_pass(transitions, reward, alpha=0.0, horizon=2)
    np.testing.assert_array_equal(hard.v[:2], [[3.0, 3.0], [1.0, 2.0]])


def test_optimistic_backup_chases_the_rare_windfall() -> None:
    # Glaze trial: standard glaze pays 1 now; experimental pays 0 now and leads with chance 0.01 to a
    # prize state paying 50 next step (else to a done state paying 0). alpha = 1, horizon 2.
    transitions, reward = glaze_trial_mdp(standard_sale=1.0, prize_value=50.0, prize_chance=0.01)
    fixed = soft_backward_pass(transitions, reward, alpha=1.0, horizon=2, start_state=DECIDE)
    posterior = soft_backward_pass(
        transitions, reward, alpha=1.0, horizon=2, start_state=DECIDE, backup="optimistic"
    )
    log2 = math.log(2)
    # Hand arithmetic. Last step: both actions identical, so V_1(prize) = 50 + log 2, V_1(done) = log 2.
    # Fixed dynamics: Q_0(standard) = 1 + log 2 = 1.6931;
    #                 Q_0(experimental) = 0.01 (50 + log 2) + 0.99 log 2 = 0.5 + log 2 = 1.1931.
    np.testing.assert_allclose(fixed.q[0, DECIDE], [1 + log2, 0.5 + log2], rtol=1e-13)
    # pi(experimental) = e^0.5 / (e^1 + e^0.5) = 1 / (1 + e^0.5) = 0.3775 < 1/2: prefers standard.
    assert fixed.policy[0, DECIDE, EXPERIMENTAL] == pytest.approx(1 / (1 + math.exp(0.5)), rel=1e-12)
    assert fixed.policy[0, DECIDE, STANDARD] > 0.6
    # V_0 = log(e^(1 + log 2) + e^(0.5 + log 2)) = log 2 + log(e + e^0.5).
    assert fixed.start_value == pytest.approx(log2 + math.log(math.e + math.exp(0.5)), rel=1e-13)
    # Posterior: Q_0(experimental) = log(0.01 e^(50 + log 2) + 0.99 e^(log 2))
    #          = log 2 + 50 + log(0.01 + 0.99 e^-50) = 50 + log 2 - 4.60517 = 46.0880.
    optimistic_q = log2 + 50 + math.log(0.01 + 0.99 * math.exp(-50))
    np.testing.assert_allclose(posterior.q[0, DECIDE], [1 + log2, optimistic_q], rtol=1e-13)
    assert posterior.q[0, DECIDE, EXPERIMENTAL] == pytest.approx(46.0880, abs=1e-4)
    # pi(experimental) = 1 / (1 + e^(1.6931 - 46.0880)) = 1 - 5e-20: all-in on the long shot.
    assert posterior.policy[0, DECIDE, EXPERIMENTAL] > 1 - 1e-15
    # alpha = 0 optimistic: the best reachable next state counts, Q_0(experimental) = 0 + 50 = 50.
    hard = soft_backward_pass(transitions, reward, alpha=0.0, horizon=2, backup="optimistic")
    np.testing.assert_array_equal(hard.q[0, DECIDE], [1.0, 50.0])


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"transitions": np.ones((3, 2, 2)) / 2}, "shape"),
        ({"reward": np.zeros(3)}, "reward must have shape"),
        ({"transitions": np.full((3, 2, 3), 0.5)}, "sum to 1"),
        ({"alpha": -0.1}, "alpha"),
        ({"discount": 1.0}, "discount"),
        ({"discount": -0.5}, "discount"),
        ({"backup": "hopeful"}, "backup"),
    ],
)
def test_bad_input_raises_one_line_value_error(change: dict, message: str) -> None:
    transitions, reward = glaze_trial_mdp()
    args = {"transitions": transitions, "reward": reward, "alpha": 0.1, "discount": 0.9} | change
    # Definitions: each P[s, a, :] is a probability distribution; soft value iteration is a contraction
    # (so converges) only for 0 <= gamma < 1; a temperature is non-negative.
    with pytest.raises(ValueError, match=message) as info:
        soft_value_iteration(**args)
    assert "\n" not in str(info.value)


def test_bad_horizon_and_start_state_raise() -> None:
    transitions, reward = glaze_trial_mdp()
    # A horizon counts decision steps (a positive integer); a start state indexes the 3 states.
    with pytest.raises(ValueError, match="horizon"):
        soft_backward_pass(transitions, reward, alpha=1.0, horizon=0)
    with pytest.raises(ValueError, match="start_state"):
        soft_backward_pass(transitions, reward, alpha=1.0, horizon=2, start_state=3)


def test_hard_limit_of_the_soft_maximum_and_greedy_ties() -> None:
    q = np.array([[1.0, 3.0, 3.0], [-2.0, 0.5, -7.0]])
    # Definition: at α = 0 the soft maximum is the ordinary max.
    np.testing.assert_array_equal(soft_maximum(q, 0.0), [3.0, 0.5])
    # Hand arithmetic at α = 2: 2 log(e^0.5 + e^1.5 + e^1.5).
    assert soft_maximum(q, 2.0)[0] == pytest.approx(2 * math.log(math.exp(0.5) + 2 * math.exp(1.5)), rel=1e-14)
    # At α = 0 the policy is greedy; an exact tie splits evenly (1/2 each), a unique best takes all.
    np.testing.assert_array_equal(boltzmann_policy(q, soft_maximum(q, 0.0), 0.0), [[0.0, 0.5, 0.5], [0.0, 1.0, 0.0]])


def test_initial_value_at_the_fixed_point_stops_after_one_sweep() -> None:
    transitions, reward = book_gridworld()
    fixed = soft_value_iteration(transitions, reward, alpha=0.0, discount=BOOK_DISCOUNT, tolerance=1e-12)
    restarted = soft_value_iteration(transitions, reward, alpha=0.0, discount=BOOK_DISCOUNT, initial_v=fixed.v)
    # Banach: a sweep from the fixed point moves V by at most γ·(its distance), here ~1e-12, so the
    # default 1e-10 bound holds after the first sweep.
    assert restarted.converged and restarted.iterations == 1


@pytest.mark.parametrize(
    ("change", "message"),
    [
        ({"tolerance": 0.0}, "tolerance must be > 0"),
        ({"max_iterations": 0}, "max_iterations must be >= 1"),
        ({"initial_v": np.zeros(2)}, r"initial_v must have shape \(3,\)"),
        ({"reward": np.full((3, 2), np.nan)}, "reward contains NaN"),
        ({"transitions": -glaze_trial_mdp()[0]}, "negative"),
    ],
)
def test_more_bad_input_names_the_argument_and_the_fix(change: dict, message: str) -> None:
    transitions, reward = glaze_trial_mdp()
    args = {"transitions": transitions, "reward": reward, "alpha": 0.1, "discount": 0.9} | change
    # Definitions: a tolerance and a sweep budget are positive; V has one entry per state (3 here);
    # rewards are finite and probabilities are not negative.
    with pytest.raises(ValueError, match=message) as info:
        soft_value_iteration(**args)
    assert "\n" not in str(info.value) and "; " in str(info.value)  # problem; fix


def test_backward_pass_terminal_value_and_discount() -> None:
    transitions, reward = glaze_trial_mdp(standard_sale=1.0, prize_value=50.0, prize_chance=0.01)
    # Hand arithmetic, α = 0, one step, γ = 0.5, terminal values V_1 = (0, 8, 2) for (decide, prize, done):
    # standard: 1 + 0.5·2 = 2; experimental: 0 + 0.5 (0.01·8 + 0.99·2) = 1.03.
    result = soft_backward_pass(transitions, reward, alpha=0.0, horizon=1, discount=0.5,
                                terminal_value=np.array([0.0, 8.0, 2.0]), start_state=DECIDE)  # fmt: skip
    np.testing.assert_allclose(result.q[0, DECIDE], [2.0, 1.03], rtol=1e-14)
    assert result.start_value == 2.0 and result.start_value == result.v[0, DECIDE]
    with pytest.raises(ValueError, match=r"terminal_value must have shape \(3,\)"):
        soft_backward_pass(transitions, reward, alpha=0.0, horizon=1, terminal_value=np.zeros(4))
    with pytest.raises(ValueError, match="horizon must be an integer"):
        soft_backward_pass(transitions, reward, alpha=0.0, horizon=True)
    with pytest.raises(ValueError, match="discount must satisfy 0 <= discount <= 1"):
        soft_backward_pass(transitions, reward, alpha=0.0, horizon=1, discount=1.5)

"""Training actions computed in NumPy equal torch's policy samples (torch is the reference).

Reference: :meth:`kiln.learner.actor.SquashedGaussianActor.sample` (torch's own softplus, tanh and
nonlinearities); the NumPy path must give the same actions to float32 rounding and leave every
agent's generator in the same state, for each nonlinearity Kiln offers.
"""

import numpy as np
import pytest
import torch

from kiln.config.nonlinearities import NONLINEARITIES
from kiln.learner import numpy_actor
from kiln.learner.actor import SquashedGaussianActor


# (population, action size): NumPy throughout, and small heads squashed in Python floats.
@pytest.mark.parametrize("population,act_dim", [(4, 2), (1, 2), (2, 1), (1, 1)])
@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_numpy_actions_equal_torch_samples(nonlinearity, population, act_dim):
    actor = SquashedGaussianActor(3, act_dim, (16, 16), nonlinearity, (-5.0, 1.0), torch.Generator().manual_seed(0), population=population)
    with torch.no_grad():  # push some raw log-stds past both soft limits and far past softplus's threshold
        actor.body.linears()[-1].bias[..., act_dim:] = torch.tensor([30.0, -30.0][:act_dim])
        if population * act_dim == 1:
            actor.body.linears()[-1].bias[..., act_dim:] = -30.0
    obs = np.random.default_rng(1).normal(size=(population, 3)).astype(np.float32) * 3
    torch_generators = [torch.Generator().manual_seed(10 + k) for k in range(population)]
    numpy_generators = [torch.Generator().manual_seed(10 + k) for k in range(population)]
    with torch.no_grad():
        expected = actor.sample(torch.from_numpy(obs).unsqueeze(1), torch_generators)[0][:, 0].numpy()
    got = numpy_actor.sample_actions(actor, obs, numpy_generators)
    assert got.shape == (population, act_dim) and got.dtype == np.float32
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-6)
    assert all(torch.equal(a.get_state(), b.get_state()) for a, b in zip(torch_generators, numpy_generators))


def test_numpy_actions_follow_weights_changed_in_place_and_replaced():
    """The NumPy path reuses views of the weights: after an optimiser step, a checkpoint load (both in
    place) and a parameter replaced outright, its actions still equal torch's samples of the new weights."""
    actor = SquashedGaussianActor(3, 1, (8,), "relu", (-5.0, 1.0), torch.Generator().manual_seed(0), population=2)
    obs = np.random.default_rng(2).normal(size=(2, 3)).astype(np.float32)

    def check() -> None:
        gens_t = [torch.Generator().manual_seed(k) for k in range(2)]
        gens_n = [torch.Generator().manual_seed(k) for k in range(2)]
        with torch.no_grad():
            expected = actor.sample(torch.from_numpy(obs).unsqueeze(1), gens_t)[0][:, 0].numpy()
        np.testing.assert_allclose(numpy_actor.sample_actions(actor, obs, gens_n), expected, rtol=1e-6, atol=1e-6)

    check()
    opt = torch.optim.Adam(actor.parameters(), lr=0.5)
    actor.sample(torch.from_numpy(obs).unsqueeze(1), [torch.Generator(), torch.Generator()])[0].sum().backward()
    opt.step()
    check()
    other = SquashedGaussianActor(3, 1, (8,), "relu", (-5.0, 1.0), torch.Generator().manual_seed(7), population=2)
    actor.load_state_dict(other.state_dict())
    check()
    first = actor.body.linears()[0]
    first.weight = torch.nn.Parameter(first.weight.detach() * 3.0)
    check()
    last = actor.body.linears()[-1]
    last.bias.data = last.bias.detach() - 1.0  # the same parameter object over new memory
    check()


@pytest.mark.parametrize("targets", [(-2.0,), (-1.0, -0.5)])  # one temperature, and one per action dimension
def test_action_and_entropy_term_equal_torch_sample_and_bonus(targets):
    """SoftActorCritic.sample_with_log_prob (NumPy) and entropy_terms against torch: the actor's reparameterised sample, its
    per-dimension log-density from kiln.learner.squashed_gaussian, and Temperature.bonus (α·log π)."""
    from kiln.config.agent_settings import AgentSettings
    from kiln.learner.sac import MemberSetup, SoftActorCritic

    agent = SoftActorCritic(3, 2, AgentSettings(layer_widths=(16, 16)), [MemberSetup(targets, torch.Generator().manual_seed(0), 0.3)])
    with torch.no_grad():  # a second temperature unlike the first, and log-stds past both soft limits
        agent.temperature.log_alpha[0, -1] = -2.0
        agent.actor.body.linears()[-1].bias[:, :, 2:] = torch.tensor([30.0, -30.0])
    obs = np.random.default_rng(3).normal(size=(5, 3)).astype(np.float32) * 2
    g_torch, g_numpy = torch.Generator().manual_seed(4), torch.Generator().manual_seed(4)
    with torch.no_grad():
        action, log_prob, _ = agent.actor.sample(torch.from_numpy(obs)[None], [g_torch])
        expected_bonus = agent.temperature.bonus(log_prob)[0].numpy()
    got_action, got_log_prob = agent.sample_with_log_prob(obs, g_numpy)
    got_bonus = agent.entropy_terms(got_log_prob)
    # A stack of several steps' log-densities gives each step's terms as a call of its own would.
    stacked = agent.entropy_terms(np.stack([got_log_prob, got_log_prob[::-1]]))
    np.testing.assert_allclose(stacked, np.stack([got_bonus, got_bonus[::-1]]), rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(got_action, action[0].numpy(), rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(got_bonus, expected_bonus, rtol=1e-5, atol=1e-5)
    assert torch.equal(g_torch.get_state(), g_numpy.get_state())


@pytest.mark.parametrize("nonlinearity", sorted(NONLINEARITIES))
def test_evaluation_actions_equal_torch_mode_and_sample(nonlinearity):
    """SquashedGaussianActor.act_batch (NumPy; what training's evaluations and the evaluate command act
    with) against torch: the mode tanh(mean) of deterministic() and the sample of sample() with the
    same generator, which must end in the same state. Observations in float64, as MuJoCo tasks give them."""
    actor = SquashedGaussianActor(5, 3, (32, 32), nonlinearity, (-20.0, 2.0), torch.Generator().manual_seed(1))
    obs = np.random.default_rng(4).normal(size=(10, 5)) * 2.0
    x = torch.as_tensor(obs, dtype=torch.float32)
    with torch.no_grad():
        mode = actor.deterministic(x).numpy()
        g_torch, g_numpy = torch.Generator().manual_seed(9), torch.Generator().manual_seed(9)
        sampled = actor.sample(x, g_torch)[0].numpy()
    got_mode = actor.act_batch(obs, True)
    got_sample = actor.act_batch(obs, False, g_numpy)
    assert got_mode.shape == got_sample.shape == (10, 3) and got_mode.dtype == got_sample.dtype == np.float32
    np.testing.assert_allclose(got_mode, mode, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(got_sample, sampled, rtol=1e-6, atol=1e-6)
    assert torch.equal(g_torch.get_state(), g_numpy.get_state())

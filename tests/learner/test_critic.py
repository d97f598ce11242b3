"""The soft Q-ensemble: every network Q_k(s, a) is an MLP of its own on the concatenated (s, a).

References: torch.nn.functional.linear and relu composed by hand for each network (the twin soft
Q-networks of Haarnoja et al. 2018, arXiv 1812.05905, are independent networks of their own weights).
"""

import torch
import torch.nn.functional as F

from kiln.learner.critic import SoftQEnsemble


def _critic(population: int = 1) -> SoftQEnsemble:
    return SoftQEnsemble(3, 2, (16, 16), "relu", members=2, generator=torch.Generator().manual_seed(0), population=population)


def _q(critic: SoftQEnsemble, row: int, obs: torch.Tensor, action: torch.Tensor) -> torch.Tensor:
    """Network ``row`` by torch.nn.functional: F.linear(x, Wᵀ, b) with relu between layers, on [s, a]."""
    x = torch.cat([obs, action], dim=-1)
    layers = critic.body.linears()
    for i, layer in enumerate(layers):
        x = F.linear(x, layer.weight[row].detach().T, layer.bias[row, 0].detach())
        if i < len(layers) - 1:
            x = F.relu(x)
    return x[:, 0]


def _inputs(*batch: int) -> tuple[torch.Tensor, torch.Tensor]:
    g = torch.Generator().manual_seed(1)
    return torch.randn(*batch, 3, generator=g), torch.rand(*batch, 2, generator=g) * 2 - 1


def test_one_agents_networks_are_each_their_own_mlp():
    critic = _critic()
    obs, action = _inputs(10)
    with torch.no_grad():
        q = critic(obs, action)
    assert q.shape == (2, 10)
    for k in range(2):
        torch.testing.assert_close(q[k], _q(critic, k, obs, action), rtol=1e-5, atol=1e-6)


def test_population_agent_p_uses_rows_p_times_members_onwards_on_its_own_inputs():
    critic = _critic(population=3)
    obs, action = _inputs(3, 6)
    with torch.no_grad():
        q = critic(obs, action)
    assert q.shape == (3, 2, 6)
    for p in range(3):
        for k in range(2):
            torch.testing.assert_close(q[p, k], _q(critic, 2 * p + k, obs[p], action[p]), rtol=1e-5, atol=1e-6)


def test_ensemble_rows_are_independent():
    # Changing one network's weights changes only its own estimates, and one network's loss gives
    # gradients to its own weights only.
    critic = _critic(population=2)
    obs, action = _inputs(2, 5)
    with torch.no_grad():
        before = critic(obs, action)
        critic.body.linears()[0].weight[3] += 1.0
        after = critic(obs, action)
    changed = (after != before).any(dim=-1)
    assert changed.tolist() == [[False, False], [False, True]]
    critic(obs, action)[0, 1].sum().backward()
    for layer in critic.body.linears():
        rows_with_gradient = (layer.weight.grad != 0).flatten(1).any(dim=1).tolist()
        assert rows_with_gradient == [False, True, False, False]

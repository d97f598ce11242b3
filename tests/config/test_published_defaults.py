"""Default hyper-parameters against the published table.

Source: Haarnoja et al. 2018, "Soft Actor-Critic Algorithms and Applications" (arXiv 1812.05905),
Appendix D, Table 1: Adam, lr 3·10⁻⁴ for all networks, γ 0.99, replay 10⁶, 2 hidden layers × 256,
ReLU, minibatch 256, target entropy −dim(A), τ 0.005, target update every step, 1 gradient step per
environment step.
"""

import pytest
import torch
import yaml

from kiln.config.agent_settings import AgentSettings, resolve_target_entropy
from kiln.config.presets import CONFIG_DIR
from kiln.learner.sac import SoftActorCritic

# Dotted key (as in configs/agent/published.yaml) → Table 1's value.
TABLE_1 = {
    "layer_widths": [256, 256],
    "nonlinearity": "relu",
    "discount": 0.99,
    "critic.target_smoothing": 0.005,
    "batch_size": 256,
    "replay_capacity": 1_000_000,
    "critic.lr": 3e-4,
    "actor.lr": 3e-4,
    "temperature.lr": 3e-4,
    "temperature.target_entropy": "minus_action_dims",
    "temperature.mode": "tuned",
}


def _lookup(tree, dotted):
    for part in dotted.split("."):
        tree = tree[part] if isinstance(tree, dict) else getattr(tree, part)
    return list(tree) if isinstance(tree, tuple) else tree


@pytest.mark.parametrize("key,value", TABLE_1.items())
def test_agent_preset_matches_table_1(key, value):
    preset = yaml.safe_load((CONFIG_DIR / "agent" / "published.yaml").read_text())
    assert _lookup(preset, key) == value


@pytest.mark.parametrize("key,value", TABLE_1.items())
def test_settings_defaults_match_table_1(key, value):
    assert _lookup(AgentSettings(), key) == value


def test_one_gradient_step_per_env_step_by_default():
    run = yaml.safe_load((CONFIG_DIR / "train.yaml").read_text())
    assert run["collect"]["updates_per_env_step"] == 1


@pytest.mark.parametrize("act_dim", [1, 3, 6])
def test_minus_action_dims_target_entropy_is_minus_action_dimension(act_dim):
    assert resolve_target_entropy("minus_action_dims", act_dim) == (-float(act_dim),)


def test_optimisers_are_adam_and_twin_critics():
    agent = SoftActorCritic.single(3, 1, AgentSettings(), (-1.0,), torch.Generator().manual_seed(0))
    for opt in (agent.actor_opt, agent.critic_opt, agent.temperature_opt):
        assert isinstance(opt, torch.optim.Adam)
        assert opt.param_groups[0]["lr"] == 3e-4
    assert agent.critic.members == 2 and agent.population == 1

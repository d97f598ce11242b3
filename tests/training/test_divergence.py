"""The divergence guard: a non-finite (or absurdly large) quantity stops the run with one line naming
the quantity, the member and the step; no policy is written from the bad state; the last good
checkpoint stays complete and loadable. Project requirement (no outside source); the faults are
injected, so what must happen is known exactly.
"""

import gymnasium as gym
import numpy as np
import pytest

from kiln.config.presets import compose_config
from kiln.errors import DivergenceError
from kiln.training.checkpoint import CheckpointStore
from kiln.training.trainer import train

SMALL = (
    "collect.warmup_steps=50", "agent.layer_widths=[16,16]", "agent.batch_size=16", "evaluate.every=100",
    "evaluate.episodes=1", "evaluate.bias_episodes=0", "log.every=50", "log.progress=off",
    "checkpoint.every=100",
)  # fmt: skip


class RewardGoesBad(gym.Env):
    """A 1-D task whose reward turns non-finite at a chosen step (kwarg ``bad_at``, value ``bad``)."""

    observation_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self, bad_at: int = 250, bad: float = float("nan")) -> None:
        self.bad_at, self.bad, self.count = bad_at, bad, 0

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        return np.zeros(1, np.float32), {}

    def step(self, action):
        self.count += 1
        reward = self.bad if self.count == self.bad_at else -float(np.square(action).sum())
        return np.zeros(1, np.float32), reward, False, False, {}


gym.register("KilnTestRewardGoesBad-v0", entry_point=RewardGoesBad, max_episode_steps=50)


@pytest.mark.parametrize("bad", [float("nan"), float("inf")])
def test_non_finite_reward_from_a_task_kwarg_stops_at_that_step(tmp_path, bad):
    config = compose_config("train", ["env.id=KilnTestRewardGoesBad-v0", "env.name=bad", "steps=400",
                                      "+env.kwargs.bad_at=250", f"+env.kwargs.bad={bad}", *SMALL])  # fmt: skip
    run_dir = tmp_path / "run"
    with pytest.raises(DivergenceError) as caught:
        train(config, run_dir)
    message = str(caught.value)
    assert "at env step 250" in message and "(member 0)" in message and "reward is" in message
    assert "\n" not in message and caught.value.exit_code == 3
    assert not (run_dir / "policy").exists() and not (run_dir / "result.json").exists()
    store = CheckpointStore(run_dir / "checkpoints", keep=2)
    assert store.latest().name == "step-000000000200"  # the last one before the fault
    assert "step-000000000200" in message
    # The kept checkpoint loads completely (same config, so it is accepted).
    import torch

    from kiln.training.replay import ReplayBuffer

    replay = ReplayBuffer(config["agent"]["replay_capacity"], 1, 1, torch.Generator())
    tensors, record = store.load(store.latest(), replay, config)
    assert record["step"] == 200 and len(replay) == 200
    assert all(torch.isfinite(t).all() for t in tensors.values() if t.is_floating_point())


def test_absurd_learning_rate_is_caught_before_a_policy_is_saved(tmp_path):
    config = compose_config("train", ["env=pendulum", "steps=400", "agent.critic.lr=1e5", "agent.actor.lr=1e5", *SMALL])
    run_dir = tmp_path / "run"
    with pytest.raises(DivergenceError) as caught:
        train(config, run_dir)
    assert caught.value.quantity.startswith(("critic/", "actor/", "temperature/", "weight "))
    assert not (run_dir / "policy").exists() and not (run_dir / "result.json").exists()

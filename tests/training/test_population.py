"""Population training (kiln.training.population): K runs in one loop give each member what its own
run would give.

Project requirement (issue "a whole comparison in one process"; no outside source): a population is
an optimisation of how runs are computed, not a change of what they compute. The references are
single runs of the same configs, trained by the same library one at a time.
"""

from pathlib import Path

import gymnasium as gym
import numpy as np
import pytest
import torch
from safetensors.torch import load_file

from kiln.config.agent_settings import AgentSettings
from kiln.config.presets import compose_config
from kiln.errors import ConfigError, DivergenceError, RunStopped
from kiln.learner.sac import MemberSetup, SoftActorCritic
from kiln.training.population import check_population, population_key, train_population
from kiln.training.replay import PopulationReplay, ReplayBuffer
from kiln.training.stop import StopRequest
from kiln.training.trainer import train

SMALL = (
    "env=pendulum", "steps=300", "collect.warmup_steps=100", "agent.layer_widths=[16,16]", "agent.batch_size=32",
    "evaluate.every=150", "evaluate.episodes=2", "evaluate.bias_episodes=1", "log.every=50", "log.progress=off",
    "checkpoint.every=100", "deterministic=true",
)  # fmt: skip


def _config(*overrides: str) -> dict:
    return compose_config("train", [*SMALL, *overrides])


def _policy(run_dir: Path) -> dict[str, torch.Tensor]:
    return load_file(next((run_dir / "policy").glob("*.safetensors")))


def _files(run_dir: Path) -> list[str]:
    return sorted(str(p.relative_to(run_dir)).split("events.out")[0] for p in run_dir.rglob("*") if p.is_file())


def test_population_of_one_is_bit_identical_to_a_single_run(tmp_path):
    single = train(_config("seed=3"), tmp_path / "single")
    (member,) = train_population([_config("seed=3")], [tmp_path / "member"])
    assert single.updates == member.updates == 200
    for name, value in _policy(tmp_path / "single").items():
        assert torch.equal(value, _policy(tmp_path / "member")[name]), name
    assert single.evaluation == member.evaluation and single.eval_curve == member.eval_curve
    assert _files(tmp_path / "single") == _files(tmp_path / "member")  # the same layout, file for file


def _filled(replay_rows: int, obs_dim: int, act_dim: int, seed: int) -> list[torch.Tensor]:
    g = torch.Generator().manual_seed(100 + seed)
    return [torch.randn(replay_rows, obs_dim, generator=g), torch.rand(replay_rows, act_dim, generator=g) * 2 - 1,
            torch.randn(replay_rows, generator=g), torch.randn(replay_rows, obs_dim, generator=g),
            (torch.rand(replay_rows, generator=g) < 0.1).float()]  # fmt: skip


def test_member_of_four_takes_the_first_update_its_own_run_takes():
    # Member k of a K = 4 population (seeds 0..3, different targets) against a K = 1 agent of member
    # k's seed and target with the same replay rows: same sampled indices, same losses to 1e-6.
    settings = AgentSettings(layer_widths=(32, 32), batch_size=64)
    seeds, targets = (0, 1, 2, 3), ((-1.0,), (-2.0,), (0.0,), (-0.5,))
    obs_dim, act_dim, rows = 5, 1, 500
    members = [MemberSetup(t, torch.Generator().manual_seed(s)) for s, t in zip(seeds, targets)]
    population = SoftActorCritic(obs_dim, act_dim, settings, members)
    replay = PopulationReplay(rows, obs_dim, act_dim, [m.generator for m in members])
    for k, buffer in enumerate(replay.buffers):
        for row in zip(*_filled(rows, obs_dim, act_dim, k)):
            buffer.add(row[0], row[1], float(row[2]), row[3], bool(row[4]))
    batch = replay.sample(settings.batch_size)
    metrics = population.update(batch)
    for k in (1, 3):
        alone_generator = torch.Generator().manual_seed(seeds[k])
        alone = SoftActorCritic.single(obs_dim, act_dim, settings, targets[k], alone_generator)
        own = ReplayBuffer(rows, obs_dim, act_dim, alone_generator)
        for row in zip(*_filled(rows, obs_dim, act_dim, k)):
            own.add(row[0], row[1], float(row[2]), row[3], bool(row[4]))
        own_batch = own.sample(settings.batch_size)
        assert torch.equal(own_batch.obs, batch.obs[k]) and torch.equal(own_batch.reward, batch.reward[k])
        lifted = type(own_batch)(*(t.unsqueeze(0) for t in vars(own_batch).values()))
        own_metrics = alone.update(lifted)
        for tag, value in own_metrics.items():
            torch.testing.assert_close(metrics[tag][k], value[0], rtol=1e-6, atol=1e-6, msg=tag)
        for name, value in alone.state_dict().items():
            torch.testing.assert_close(population.member_state(k)[name], value, rtol=1e-6, atol=1e-6, msg=name)


def test_members_of_a_population_match_their_own_runs(tmp_path):
    seeds = (0, 1, 2)
    targets = ("-1.0", "-0.5", "0.0")
    configs = [_config(f"seed={s}", f"agent.temperature.target_entropy={t}") for s, t in zip(seeds, targets)]
    outcomes = train_population(configs, [tmp_path / f"m{s}" for s in seeds])
    for s, config, outcome in zip(seeds, configs, outcomes):
        alone = train(config, tmp_path / f"alone{s}")
        assert outcome.population == 3 and alone.population == 1
        assert outcome.seed == s and outcome.target_entropy == alone.target_entropy
        assert _files(tmp_path / f"m{s}") == _files(tmp_path / f"alone{s}")
        ours, theirs = _policy(tmp_path / f"m{s}"), _policy(tmp_path / f"alone{s}")
        for name in theirs:  # 200 updates on: still the same network (not required bit for bit)
            torch.testing.assert_close(ours[name], theirs[name], rtol=1e-4, atol=1e-5)


class _StopAt(StopRequest):
    """A stop request raised when the loop has taken ``steps`` env steps (as SIGTERM would)."""

    def __init__(self, steps: int) -> None:
        super().__init__(watch_parent=False)
        self.checks, self.steps = 0, steps

    @property
    def requested(self) -> bool:
        self.checks += 1
        if self.checks >= self.steps:
            self.request("SIGTERM")
        return self.reason is not None


def test_stopped_and_resumed_population_is_bit_identical(tmp_path):
    configs = [_config(f"seed={s}") for s in (0, 1)]
    straight = train_population(configs, [tmp_path / "a0", tmp_path / "a1"])
    with pytest.raises(RunStopped) as caught:
        train_population(configs, [tmp_path / "b0", tmp_path / "b1"], _StopAt(170))
    assert "each run folder (2 runs)" in str(caught.value)
    resumed = train_population(configs, [tmp_path / "b0", tmp_path / "b1"])
    for k in (0, 1):
        assert resumed[k].eval_curve == straight[k].eval_curve
        for name, value in _policy(tmp_path / f"a{k}").items():
            assert torch.equal(value, _policy(tmp_path / f"b{k}")[name]), name
    again = train_population(configs, [tmp_path / "b0", tmp_path / "b1"])
    assert all(r.skipped for r in again)  # finished members are left as they are


class _OddSeedGoesBad(gym.Env):
    """A 1-D task whose reward turns NaN at its 250th step when its first reset had an odd seed: an
    injected fault that hits one member of a population (members differ in seed)."""

    observation_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)
    action_space = gym.spaces.Box(-1.0, 1.0, (1,), np.float32)

    def __init__(self) -> None:
        self.count, self.odd = 0, None

    def reset(self, *, seed=None, options=None):
        super().reset(seed=seed)
        if self.odd is None:
            self.odd = seed is not None and seed % 2 == 1
        return np.zeros(1, np.float32), {}

    def step(self, action):
        self.count += 1
        reward = float("nan") if self.odd and self.count == 250 else -float(np.square(action).sum())
        return np.zeros(1, np.float32), reward, False, False, {}


gym.register("KilnTestOddSeedGoesBad-v0", entry_point=_OddSeedGoesBad, max_episode_steps=50)


def test_a_diverging_member_stops_alone(tmp_path):
    task = ("env.id=KilnTestOddSeedGoesBad-v0", "env.name=odd", "evaluate.bias_episodes=0")
    outcomes = train_population([_config("seed=0", *task), _config("seed=1", *task)], [tmp_path / "good", tmp_path / "bad"])
    assert outcomes[0].final.return_eval is not None and (tmp_path / "good" / "result.json").exists()
    assert isinstance(outcomes[1], DivergenceError) and outcomes[1].member == 1
    assert "at env step 250" in str(outcomes[1]) and "step-000000000200" in str(outcomes[1])
    assert not (tmp_path / "bad" / "result.json").exists() and not (tmp_path / "bad" / "policy").exists()


def test_members_may_differ_only_in_member_keys(tmp_path):
    assert population_key(_config("seed=0", "agent.temperature.target_entropy=-1.0")) == population_key(_config("seed=4"))
    with pytest.raises(ConfigError) as caught:
        check_population([_config("seed=0"), _config("seed=1", "agent.actor.lr=0.01")], [tmp_path / "a", tmp_path / "b"])
    assert "member 1" in str(caught.value) and "\n" not in str(caught.value)
    with pytest.raises(ConfigError):
        check_population([_config(), _config()], [tmp_path / "a", tmp_path / "a"])


def test_a_population_needs_one_folder_per_member(tmp_path):
    with pytest.raises(ConfigError, match="got 0 configs and 0 folders"):
        check_population([], [])
    with pytest.raises(ConfigError, match="got 2 configs and 1 folders"):
        check_population([_config("seed=0"), _config("seed=1")], [tmp_path / "a"])
    # The same folder written two ways is still one folder.
    with pytest.raises(ConfigError, match="share a run folder"):
        check_population([_config("seed=0"), _config("seed=1")], [tmp_path / "a", tmp_path / "x" / ".." / "a"])


def test_members_share_the_number_of_temperatures():
    # Members share the number of temperatures: a number and a one-entry list both mean one α (count 1,
    # by hand); a two-entry list means two, so that member trains apart.
    one = _config("seed=0", "agent.temperature.target_entropy=-1.0")
    per_dimension = _config("seed=1", "agent.temperature.target_entropy=[-1.0]")
    two = _config("seed=1", "agent.temperature.target_entropy=[-1.0,-0.5]")
    assert population_key(one) == population_key(per_dimension)  # one action dimension: one α either way
    assert population_key(one) != population_key(two)

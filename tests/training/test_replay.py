"""The replay buffer (kiln.training.replay): packed float32 rows, a ring that overwrites the oldest,
uniform sampling from the run's generator, changed-chunk bookkeeping for checkpoints, the memory
check, and a population's buffers side by side.

Sources: SciPy's ``chisquare`` (goodness of fit of the sampled slots to the uniform distribution),
``torch.randint``'s docs (uniform integers from a given generator, so the same generator state
draws the same indices), IEEE 754 binary32 (4 bytes a float), ``os.sysconf`` (SC_PAGE_SIZE ×
SC_PHYS_PAGES is the machine's memory), and hand arithmetic written beside each check.
"""

import os

import numpy as np
import pytest
import torch
from scipy import stats

from kiln.errors import ConfigError
from kiln.training import replay as replay_module
from kiln.training.replay import (
    CHUNK_ROWS,
    PopulationReplay,
    ReplayBuffer,
    check_replay_fits,
    replay_bytes,
    row_width,
    split_row,
)


def _filled(capacity: int, count: int, obs_dim: int = 1, act_dim: int = 1, seed: int = 0) -> ReplayBuffer:
    replay = ReplayBuffer(capacity, obs_dim, act_dim, torch.Generator().manual_seed(seed))
    for i in range(count):
        replay.add(np.full(obs_dim, i), np.full(act_dim, 0.5), float(i), np.full(obs_dim, i + 1), i % 2 == 1)
    return replay


def test_a_row_packs_obs_action_reward_next_obs_and_the_flag():
    # obs 3 + action 2 + reward 1 + next_obs 3 + terminated 1 = 10 floats.
    assert row_width(3, 2) == 10
    replay = ReplayBuffer(4, 3, 2, torch.Generator())
    row = replay.add(np.array([1.0, 2.0, 3.0]), np.array([-0.5, 0.5]), 7.0, np.array([4.0, 5.0, 6.0]), True)
    assert row.dtype == np.float32
    assert row.tolist() == [1.0, 2.0, 3.0, -0.5, 0.5, 7.0, 4.0, 5.0, 6.0, 1.0]
    obs, action, reward, next_obs, terminated = split_row(replay.rows[:1], 3, 2)
    assert obs.tolist() == [[1.0, 2.0, 3.0]] and action.tolist() == [[-0.5, 0.5]]
    assert reward.tolist() == [7.0] and next_obs.tolist() == [[4.0, 5.0, 6.0]] and terminated.tolist() == [1.0]
    assert torch.equal(replay.obs[0], obs[0])  # the named fields are views of the rows


def test_memory_is_rows_times_width_times_four_bytes():
    # Hand arithmetic: 1 000 000 rows of HalfCheetah (obs 17, act 6): (2·17 + 6 + 2) · 4 B = 168 B a row.
    assert replay_bytes(1_000_000, 17, 6) == 168_000_000
    assert ReplayBuffer(10, 17, 6, torch.Generator()).rows.element_size() * row_width(17, 6) == 168


def test_a_buffer_beyond_half_the_machine_is_refused_before_allocating():
    machine = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    # Rows of obs 1, act 1 take (2·1 + 1 + 2) · 4 = 20 bytes: the largest capacity within half the
    # machine, and one row more than that.
    fits = machine // 2 // 20
    check_replay_fits(fits, 1, 1)
    with pytest.raises(ConfigError) as caught:
        check_replay_fits(fits + 1, 1, 1)
    message = str(caught.value)
    assert message.startswith(f"agent.replay_capacity={fits + 1} needs ") and "\n" not in message
    assert message.endswith(f"lower agent.replay_capacity to at most {fits}")
    # Four runs' buffers need four times the memory: a quarter of the capacity each.
    with pytest.raises(ConfigError, match="buffers of 4 runs"):
        check_replay_fits(fits // 4 + 1, 1, 1, agents=4)


def test_ring_buffer_overwrites_oldest():
    replay = _filled(3, 5)
    assert len(replay) == 3
    assert sorted(replay.reward.tolist()) == [2.0, 3.0, 4.0]
    # Five writes into three rows: rows 0, 1, 2, then 0 and 1 again; row 2 is the next to go.
    assert replay.position == {"capacity": 3, "size": 3, "next": 2, "chunk_rows": CHUNK_ROWS}


def test_sampling_is_uniform_chi_square():
    # Uniform sampling: a chi-square goodness-of-fit test (scipy.stats.chisquare) on 20 slots.
    replay = _filled(20, 20)
    counts = np.bincount(torch.cat([replay.sample(500).reward for _ in range(40)]).long().numpy(), minlength=20)
    assert stats.chisquare(counts).pvalue > 1e-3


def test_samples_come_only_from_filled_rows_and_from_the_runs_generator():
    replay = _filled(100, 7, seed=5)
    batch = replay.sample(1000)
    assert set(batch.reward.long().tolist()) <= set(range(7))
    # torch.randint on the same generator state gives the same indices: the run's generator decides.
    expected = torch.randint(7, (1000,), generator=torch.Generator().manual_seed(5))
    assert torch.equal(batch.reward, expected.float())


def test_an_empty_buffer_and_a_zero_capacity_are_errors():
    with pytest.raises(RuntimeError, match="empty replay buffer"):
        ReplayBuffer(5, 1, 1, torch.Generator()).sample(2)
    with pytest.raises(ValueError, match="capacity must be > 0"):
        ReplayBuffer(0, 1, 1, torch.Generator())


def test_only_changed_chunks_are_reported_until_saved(monkeypatch):
    monkeypatch.setattr(replay_module, "CHUNK_ROWS", 4)  # small chunks: rows 0-3, 4-7, 8-9
    replay = ReplayBuffer(10, 1, 1, torch.Generator())
    assert replay.dirty_chunks() == []
    replay.add(np.zeros(1), np.zeros(1), 0.0, np.zeros(1), False)  # row 0: chunk 0
    assert replay.dirty_chunks() == [0]
    replay.mark_saved([0])
    assert replay.dirty_chunks() == []
    for i in range(1, 10):  # rows 1..9 touch chunks 0, 1 and 2
        replay.add(np.zeros(1), np.zeros(1), float(i), np.zeros(1), False)
    assert replay.dirty_chunks() == [0, 1, 2]
    replay.mark_saved([0, 2])
    assert replay.dirty_chunks() == [1]
    replay.mark_saved([1])
    replay.add(np.zeros(1), np.zeros(1), 10.0, np.zeros(1), False)  # the ring wraps to row 0
    assert replay.dirty_chunks() == [0]


def test_chunks_round_trip_into_a_fresh_buffer(monkeypatch):
    monkeypatch.setattr(replay_module, "CHUNK_ROWS", 4)
    original = _filled(10, 13, obs_dim=2, act_dim=1)  # 13 writes into 10 rows: the ring wrapped
    copy = ReplayBuffer(10, 2, 1, torch.Generator())
    assert original.dirty_chunks() == [0, 1, 2]
    for index in original.dirty_chunks():
        copy.load_chunk(index, original.chunk(index))
    copy.set_position(original.size, original.position["next"])
    assert torch.equal(copy.rows, original.rows) and len(copy) == 10 and copy.position["next"] == 3
    assert copy.dirty_chunks() == []  # what was just loaded is on disk already
    # The last chunk is short: rows 8 and 9.
    assert original.chunk(2)["reward"].tolist() == [8.0, 9.0]


def test_a_damaged_chunk_or_position_is_refused():
    replay = ReplayBuffer(10, 2, 1, torch.Generator())
    chunk = replay.chunk(0)
    with pytest.raises(ValueError, match="obs missing or of the wrong shape"):
        replay.load_chunk(0, {**chunk, "obs": torch.zeros(10, 3)})
    with pytest.raises(ValueError, match="reward missing"):
        replay.load_chunk(0, {k: v for k, v in chunk.items() if k != "reward"})
    with pytest.raises(ValueError, match="does not fit capacity 10"):
        replay.set_position(11, 0)
    with pytest.raises(ValueError, match="does not fit capacity 10"):
        replay.set_position(5, 10)


def test_population_members_sample_as_their_own_buffers_would():
    seeds = (3, 4, 9)
    population = PopulationReplay(50, 2, 1, [torch.Generator().manual_seed(s) for s in seeds])
    alone = [ReplayBuffer(50, 2, 1, torch.Generator().manual_seed(s)) for s in seeds]
    for k, (shared, own) in enumerate(zip(population.buffers, alone)):
        for i in range(20 + k):  # the buffers fill in step; one more row for each later member
            values = (np.array([k, i]), np.array([0.1 * k]), float(100 * k + i), np.array([i, k]), False)
            shared.add(*values)
            own.add(*values)
    assert len(population) == 20  # the emptiest buffer
    batch = population.sample(16)
    assert batch.obs.shape == (3, 16, 2) and batch.reward.shape == (3, 16)
    for k, own in enumerate(alone):
        theirs = own.sample(16)
        assert torch.equal(batch.obs[k], theirs.obs) and torch.equal(batch.reward[k], theirs.reward)
    # Each member's rows live in its own slice of the one storage.
    assert population.storage[1, 0, 0].item() == 1.0 and population.buffers[1].rows.data_ptr() == population.storage[1].data_ptr()

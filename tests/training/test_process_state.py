"""torch_settings: torch's thread count and deterministic-algorithms switch set inside the block and put
back as the caller had them, however the block ends; and the training function leaves them so.

The project's rule (README, "Use from Python"; DEVELOPERS.md's rule that nothing the library does
stays changed in the caller's process); every value is read back through torch's own getters.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
import torch

from kiln.training.process_state import TorchSettings, torch_settings


def _torch_state() -> tuple[int, bool, bool]:
    """Torch's own reading of the three settings."""
    return (
        torch.get_num_threads(),
        torch.are_deterministic_algorithms_enabled(),
        torch.is_deterministic_algorithms_warn_only_enabled(),
    )


@pytest.fixture(autouse=True)
def callers_torch() -> Iterator[None]:
    """Whatever a test leaves, the settings go back to the suite's own (set with torch's calls directly)."""
    threads, deterministic, warn_only = _torch_state()
    yield
    torch.set_num_threads(threads)
    torch.use_deterministic_algorithms(deterministic, warn_only=warn_only)


def test_threads_are_set_inside_and_the_callers_count_comes_back() -> None:
    torch.set_num_threads(3)
    with torch_settings(threads=1) as caller:
        assert torch.get_num_threads() == 1
        assert caller.threads == 3
    assert torch.get_num_threads() == 3


def test_strict_determinism_inside_then_the_callers_switch_off_again() -> None:
    torch.use_deterministic_algorithms(False)
    with torch_settings(deterministic=True):
        assert _torch_state()[1:] == (True, False)
    assert _torch_state()[1:] == (False, False)


def test_a_callers_warn_only_determinism_comes_back_after_a_strict_block() -> None:
    torch.use_deterministic_algorithms(True, warn_only=True)
    with torch_settings(deterministic=True):
        assert _torch_state()[1:] == (True, False)  # deterministic: true promises bit-identical runs
    assert _torch_state()[1:] == (True, True)


def test_not_asking_for_determinism_keeps_the_callers_setting_inside() -> None:
    torch.use_deterministic_algorithms(True, warn_only=True)
    torch.set_num_threads(2)
    with torch_settings():
        assert _torch_state() == (2, True, True)
    assert _torch_state() == (2, True, True)


def test_settings_come_back_when_the_block_raises() -> None:
    torch.set_num_threads(3)
    torch.use_deterministic_algorithms(False)
    with pytest.raises(RuntimeError, match="inside"), torch_settings(threads=1, deterministic=True):
        raise RuntimeError("inside")
    assert _torch_state() == (3, False, False)


def test_a_change_made_inside_the_block_is_undone_too() -> None:
    # A guard with nothing to set (as the Python API uses it) undoes whatever ran inside.
    torch.set_num_threads(3)
    torch.use_deterministic_algorithms(False)
    with torch_settings():
        torch.set_num_threads(1)
        torch.use_deterministic_algorithms(True)
    assert _torch_state() == (3, False, False)


def test_a_thread_count_below_one_is_refused_before_anything_changes() -> None:
    torch.set_num_threads(2)
    with pytest.raises(ValueError, match="at least 1"), torch_settings(threads=0):
        pass
    assert torch.get_num_threads() == 2


def test_current_reads_what_torch_reports() -> None:
    torch.set_num_threads(2)
    torch.use_deterministic_algorithms(True, warn_only=True)
    assert TorchSettings.current() == TorchSettings(2, True, True)


def test_the_training_function_itself_puts_the_callers_settings_back(tmp_path: Path) -> None:
    # Not only the Python API: kiln.training.trainer.train, which the commands, the population worker
    # and `kiln verify` call, sets threads: 1 and deterministic: true only while it trains.
    from kiln.config.presets import compose_config
    from kiln.training.trainer import train

    raw = compose_config("train", [
        "steps=60", "collect.warmup_steps=20", "evaluate.every=60", "evaluate.episodes=1", "evaluate.bias_episodes=0",
        "checkpoint.every=60", "log.every=30", "log.progress=off", "agent.layer_widths=[8]", "agent.batch_size=8",
        "agent.replay_capacity=60", "threads=1", "deterministic=true",
    ])  # fmt: skip
    torch.set_num_threads(3)
    torch.use_deterministic_algorithms(True, warn_only=True)
    result = train(raw, tmp_path / "run")
    assert result.steps == 60
    assert _torch_state() == (3, True, True)

"""Builds fake run directories for the comparison tests: invented numbers, written with torch's
SummaryWriter, OmegaConf and json exactly as the contract with the training loop describes."""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from omegaconf import OmegaConf
from torch.utils.tensorboard import SummaryWriter


def run_config(seed: int, target_entropy: Any, *, env_id: str = "Pendulum-v1", steps: int = 1000) -> dict:
    """A small resolved run config in the shape the training loop writes (README.md, "Training": the
    agent's keys; ``target_entropy`` is ``minus_action_dims``, a number or a list)."""
    return {
        "seed": seed,
        "steps": steps,
        "env": {"id": env_id, "name": env_id.split("-")[0].lower()},
        "agent": {"temperature": {"mode": "tuned", "start": 1.0, "target_entropy": target_entropy, "lr": 3e-4}},
    }


def write_run(
    directory: Path,
    config: Mapping[str, Any],
    scalars: Mapping[str, Sequence[tuple[int, float]]],
    result: Mapping[str, Any] | None = None,
    *,
    finished: bool = True,
) -> Path:
    """Writes config.yaml, an event file holding ``scalars`` and result.json.

    Args:
        directory: The run directory (created).
        config: Plain config data.
        scalars: Tag → (step, value) pairs.
        result: Contents of result.json; None writes a minimal one (task and steps only, so the
            numbers come from the event files).
        finished: False writes no result.json: a run still training, or one that was killed.

    Returns:
        ``directory``.
    """
    directory.mkdir(parents=True, exist_ok=True)
    OmegaConf.save(OmegaConf.create(dict(config)), directory / "config.yaml")
    if scalars:
        writer = SummaryWriter(log_dir=str(directory))
        for tag, pairs in scalars.items():
            for step, value in pairs:
                writer.add_scalar(tag, value, step)
        writer.close()
    if result is None and finished:
        steps = max((step for pairs in scalars.values() for step, _ in pairs), default=0)
        result = {"env_id": dict(config).get("env", {}).get("id"), "steps": steps}
    if finished:
        (directory / "result.json").write_text(json.dumps(dict(result or {})), encoding="utf-8")
    return directory


def training_scalars(final_return: float, entropy: float, alpha: float, target: float,
                     steps: Sequence[int] = (0, 250, 500, 750, 1000)) -> dict[str, list[tuple[int, float]]]:
    """Invented, smoothly improving scalars ending exactly at the given final values.

    Returns:
        Tag → (step, value) pairs for return/eval, actor/entropy_nats, temperature/value and
        temperature/target_entropy.
    """
    last = steps[-1]
    return {
        "return/eval": [(s, final_return - 500.0 * (1 - s / last)) for s in steps],
        "actor/entropy_nats": [(s, entropy + 1.0 * (1 - s / last)) for s in steps],
        "temperature/value": [(s, alpha * (1.0 + 9.0 * (1 - s / last))) for s in steps],
        "temperature/target_entropy": [(s, target) for s in steps],
    }

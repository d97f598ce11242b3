"""Real training through the library on Gymnasium tasks (slow; run in CI), as single runs and as
members of a population (several runs in one process, kiln.training.population).

Budgets are stated per task below; population members get the same budgets and thresholds. Jobs go
two at a time (one torch thread each), since two single-thread jobs beat one two-thread job on a
2-core machine (DEVELOPERS.md, "Benchmark").
"""

from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import pytest

from kiln.config.presets import compose_config
from kiln.training.population import train_population

# Pendulum-v1 has no registered reward threshold; a mean return ≥ −200 over 10 deterministic episodes
# is common practice (no source). Budget: the preset's 6 000 env steps (configs/env/pendulum.yaml), chosen to keep the suite short.
PENDULUM_SEEDS = (0, 1, 2)
PENDULUM_THRESHOLD = -200.0
# Gymnasium's registered reward threshold for InvertedPendulum-v5 (env.spec.reward_threshold).
INVERTED_PENDULUM_THRESHOLD = 950.0
INVERTED_PENDULUM_SEEDS = (0, 1)


def _run(job: tuple[str, tuple[int, ...], str]) -> list[dict]:
    """Train the seeds as one population (one seed: a single run) and return each member's result."""
    preset, seeds, root = job
    configs = [compose_config("train", [f"env={preset}", "log.progress=off", f"seed={s}"]) for s in seeds]
    outcomes = train_population(configs, [Path(root) / f"seed{s}" for s in seeds])
    return [o.to_json() for o in outcomes]


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    root = tmp_path_factory.mktemp("learning")
    jobs = {
        "pendulum/population": ("pendulum", PENDULUM_SEEDS, str(root / "pendulum_population")),
        "inverted_pendulum/population": ("inverted_pendulum", INVERTED_PENDULUM_SEEDS, str(root / "ip_population")),
        "pendulum/single": ("pendulum", (0,), str(root / "pendulum_single")),
        "inverted_pendulum/single": ("inverted_pendulum", (0,), str(root / "ip_single")),
    }
    with ProcessPoolExecutor(max_workers=2) as pool:
        return dict(zip(jobs, pool.map(_run, jobs.values())))


def _curve(result: dict) -> str:
    return ", ".join(f"{int(step)}: {ret:.0f}" for step, ret in result["eval_curve"])


@pytest.mark.slow
@pytest.mark.parametrize("seed", PENDULUM_SEEDS)
def test_pendulum_member_of_a_population_reaches_minus_200(results, seed):
    result = results["pendulum/population"][PENDULUM_SEEDS.index(seed)]
    assert result["seed"] == seed and result["population"] == len(PENDULUM_SEEDS)
    assert result["steps"] == 6000 and result["evaluation"]["episodes"] == 10
    assert result["final"]["return_eval"] >= PENDULUM_THRESHOLD, _curve(result)


@pytest.mark.slow
def test_pendulum_single_run_reaches_minus_200(results):
    (result,) = results["pendulum/single"]
    assert result["population"] == 1 and result["steps"] == 6000
    assert result["final"]["return_eval"] >= PENDULUM_THRESHOLD, _curve(result)


@pytest.mark.slow
@pytest.mark.parametrize("key,index", [("inverted_pendulum/single", 0), ("inverted_pendulum/population", 0), ("inverted_pendulum/population", 1)])
def test_inverted_pendulum_reaches_registered_threshold(results, key, index):
    import gymnasium as gym

    assert gym.spec("InvertedPendulum-v5").reward_threshold == INVERTED_PENDULUM_THRESHOLD
    result = results[key][index]
    assert result["final"]["return_eval"] >= INVERTED_PENDULUM_THRESHOLD, _curve(result)

"""The console lines that sum up a finished run (kiln.storage.run_summary.describe_run).

Expected lines are written out by hand from the record below (Python's format spec: ``.1f`` rounds
to one decimal, ``.0f`` to none); the file names are the run folder's (kiln.storage.run_folder).
"""

from pathlib import Path

from kiln.storage.run_folder import FinalNumbers, RunResult
from kiln.storage.run_summary import describe_run


def _result(**changes) -> RunResult:
    values = dict(
        env_id="Pendulum-v1", env_name="pendulum", seed=0, steps=6000, target_entropy=-1.0, target_entropy_groups=[-1.0],
        temperature_mode="tuned", final=FinalNumbers(-152.34, 80.0, 0.5, 0.04),
        evaluation={"episodes": 3, "return_mean": -152.34, "return_std": 80.06, "return_min": -260.0, "return_max": -1.25},
        evaluation_seeds=[1000, 1001, 1002], eval_deterministic=True, eval_curve=[], updates=5000,
        updates_per_s=212.6, wall_time_s=61.4,
    )  # fmt: skip
    values.update(changes)
    return RunResult(**values)


def test_a_finished_run_is_described_line_by_line():
    run = Path("outputs/pendulum/run1")
    assert describe_run(run, _result()).splitlines() == [
        "",
        "run folder   outputs/pendulum/run1",
        "TensorBoard  tensorboard --logdir outputs/pendulum/run1",
        "policy       outputs/pendulum/run1/policy",
        # −152.34 → −152.3, 80.06 → 80.1, −1.25 → −1.2 (round half to even on the binary value), 212.6 → 213, 61.4 → 61.
        (
            "evaluation   3 deterministic episodes of Pendulum-v1 after 6000 steps (reset seeds 1000..1002): "
            "return -152.3 ± 80.1 (min -260.0, max -1.2)"
        ),
        "reproduce    kiln evaluate policy=outputs/pendulum/run1   (same reset seeds, same sampling)",
        "time         61 s wall, 5000 updates at 213/s",
    ]


def test_a_stochastic_evaluation_of_one_episode_says_how_to_reproduce_it():
    lines = describe_run(Path("r"), _result(eval_deterministic=False, evaluation_seeds=[7], updates_per_s=None)).splitlines()
    assert "1 stochastic episode of Pendulum-v1" in lines[4] and "(reset seed 7)" in lines[4]  # one seed, as kiln evaluate words it
    assert lines[5] == "reproduce    kiln evaluate policy=r deterministic=false   (same reset seeds, same sampling)"
    assert lines[6] == "time         61 s wall, 5000 updates"  # no update rate known: none shown


def test_a_skipped_run_is_one_line_saying_it_was_left_alone():
    result = _result(skipped=True)
    assert describe_run(Path("runs/a"), result) == "runs/a already holds a finished run (result.json); left as it is."

"""Through the real command line: train → saved policy → evaluate → JSON, and the TensorBoard record."""

import json

import pytest
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

from tests.support.cli import TINY_RUN, run_script

# Kiln's tag scheme (README, "TensorBoard").
EXPECTED_TAGS = {
    "return/train", "return/eval", "return/eval_std", "length/train",
    "critic/td_mse", "critic/q_mean", "critic/q_spread", "critic/target_mean",
    "actor/objective", "actor/entropy_nats", "actor/log_std_mean",
    "temperature/value", "temperature/target_entropy", "temperature/objective",
    "speed/env_steps_per_s", "speed/updates_per_s", "bias/q_minus_return",
    "final/return_eval", "final/entropy", "final/alpha",
}  # fmt: skip


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    work = tmp_path_factory.mktemp("e2e")
    run_dir = work / "run"
    proc = run_script("train", *TINY_RUN, f"hydra.run.dir={run_dir}", cwd=work, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return work, run_dir, proc


def test_train_reports_where_things_are(trained):
    _, run_dir, proc = trained
    assert f"tensorboard --logdir {run_dir}" in proc.stdout
    assert str(run_dir / "policy") in proc.stdout
    assert "2 deterministic episodes of Pendulum-v1 after 300 steps" in proc.stdout


def test_run_folder_layout(trained):
    _, run_dir, _ = trained
    names = {p.name for p in run_dir.iterdir()}
    assert {"config.yaml", "result.json", "policy"} <= names
    assert any(n.startswith("events.out.tfevents") for n in names)
    assert {p.name for p in (run_dir / "policy").iterdir()} == {"weights.safetensors", "spec.json"}
    result = json.loads((run_dir / "result.json").read_text())
    # Pendulum-v1 has a 1-D action: auto target entropy is −dim(A) = −1 (Table 1).
    assert result["target_entropy"] == -1.0
    assert [step for step, _ in result["eval_curve"]] == [150, 300]
    # 200 updates: one per env step after the 100 warm-up steps (Table 1: one gradient step per env step).
    assert result["updates"] == 200


def test_tensorboard_tags_and_hparams(trained):
    _, run_dir, _ = trained
    acc = EventAccumulator(str(run_dir), size_guidance={"scalars": 0})
    acc.Reload()
    assert EXPECTED_TAGS <= set(acc.Tags()["scalars"])
    assert [e.step for e in acc.Scalars("return/eval")] == [150, 300]
    # The hparams plugin data sits in the run's own event file so the HParams view lists this run.
    plugin = acc.PluginTagToContent("hparams")
    assert "_hparams_/experiment" in plugin and "_hparams_/session_start_info" in plugin


def test_evaluate_the_saved_policy(trained):
    work, run_dir, _ = trained
    proc = run_script("evaluate", f"policy={run_dir}", "episodes=3", "seed=5", cwd=work, timeout=300)
    assert proc.returncode == 0, proc.stderr
    out = run_dir / "evaluations" / "deterministic_seed5_3ep.json"
    assert f"wrote    {out}" in proc.stdout
    record = json.loads(out.read_text())
    assert record["seeds"] == [5, 6, 7]
    returns = [e["return"] for e in record["episode_list"]]
    assert record["summary"]["return_mean"] == pytest.approx(sum(returns) / 3)
    # `episodes` counts, as in result.json; the per-episode records are `episode_list`.
    assert record["summary"]["episodes"] == len(record["episode_list"]) == 3 and "episodes" not in record
    # Pendulum-v1 truncates at its registered 200 steps and never terminates (Gymnasium registry).
    assert all(e["length"] == 200 and not e["terminated"] for e in record["episode_list"])


def test_evaluation_is_reproducible_and_stochastic_mode_differs(trained):
    work, run_dir, _ = trained
    paths = []
    for mode in ("true", "false"):
        out = work / f"eval_{mode}.json"
        proc = run_script("evaluate", f"policy={run_dir}/policy", "episodes=2", f"deterministic={mode}",
                          f"out={out}", cwd=work, timeout=300)  # fmt: skip
        assert proc.returncode == 0, proc.stderr
        paths.append(out)
    det, sto = (json.loads(p.read_text()) for p in paths)
    again = run_script("evaluate", f"policy={run_dir}/policy", "episodes=2", f"out={work}/again.json", cwd=work)
    assert again.returncode == 0
    assert json.loads((work / "again.json").read_text())["episode_list"] == det["episode_list"]
    assert sto["mode"] == "stochastic" and sto["episode_list"] != det["episode_list"]


def test_evaluate_records_video(trained):
    # Gymnasium's RecordVideo writes one MP4 per episode (needs the [video] extra, installed by CI).
    work, run_dir, _ = trained
    out = work / "video_eval.json"
    proc = run_script("evaluate", f"policy={run_dir}", "episodes=2", "video=true", f"out={out}", cwd=work)
    assert proc.returncode == 0, proc.stderr
    videos = sorted((work / "video_eval").glob("*.mp4"))
    assert len(videos) == 2 and all(v.stat().st_size > 1000 for v in videos)


def test_evaluate_reproduces_the_figure_training_printed(trained):
    # What a first user hit: the train summary's evaluation could not be reproduced by the evaluate
    # command it suggests (different reset seeds). Without seed=, evaluate reuses the run's own
    # evaluation episodes, so the two numbers are equal (project requirement, no outside source).
    work, run_dir, train_proc = trained
    result = json.loads((run_dir / "result.json").read_text())
    proc = run_script("evaluate", f"policy={run_dir}", f"out={work}/same.json", cwd=work, timeout=300)
    assert proc.returncode == 0, proc.stderr
    record = json.loads((work / "same.json").read_text())
    assert record["seeds"] == result["evaluation_seeds"]
    assert record["summary"]["return_mean"] == result["evaluation"]["return_mean"]
    assert record["summary"]["return_std"] == result["evaluation"]["return_std"]
    assert f"reproduce    kiln evaluate policy={run_dir}" in train_proc.stdout
    assert "the training run's evaluation episodes" in proc.stdout


def test_stochastic_evaluation_is_reproduced_too(tmp_path):
    # A run evaluated with sampled actions: evaluate deterministic=false repeats its sampling stream.
    run_dir = tmp_path / "run"
    proc = run_script("train", *TINY_RUN, "evaluate.deterministic=false", f"hydra.run.dir={run_dir}",
                      cwd=tmp_path, timeout=300)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    result = json.loads((run_dir / "result.json").read_text())
    again = run_script("evaluate", f"policy={run_dir}", "deterministic=false", f"out={tmp_path}/s.json",
                       cwd=tmp_path, timeout=300)  # fmt: skip
    assert again.returncode == 0, again.stderr
    record = json.loads((tmp_path / "s.json").read_text())
    assert record["summary"]["return_mean"] == result["evaluation"]["return_mean"]

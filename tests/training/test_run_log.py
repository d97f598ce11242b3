"""TensorBoard output of a run (kiln.training.run_log), read back with TensorBoard's own reader.

Sources: TensorBoard's ``EventAccumulator`` (what TensorBoard shows of an event folder, with its
purge rule: a session restart at step s drops what was logged at step s and after) and its hparams
plugin's protocol buffers (``plugin_data_pb2.HParamsPluginData``: the experiment's hyper-parameter
and metric names, and the session's values).
"""

import time

import pytest
from tensorboard.backend.event_processing.event_accumulator import EventAccumulator
from tensorboard.plugins.hparams import plugin_data_pb2

from kiln.training.run_log import FINAL_METRICS, RunLog


def _read(folder) -> EventAccumulator:
    events = EventAccumulator(str(folder), size_guidance={"scalars": 0})
    events.Reload()
    return events


def test_scalars_are_written_into_the_run_folder_under_their_tags(tmp_path):
    log = RunLog(tmp_path)
    log.scalars({"return/eval": -812.5, "return/eval_std": 40.0}, 300)
    log.scalars({"return/eval": -150.25}, 600)
    log.close()
    # Straight in the run folder (no sub-folder), so --logdir on a sweep lists one run per folder.
    assert [p.name.startswith("events.out.tfevents") for p in tmp_path.iterdir()] == [True]
    events = _read(tmp_path)
    assert sorted(events.Tags()["scalars"]) == ["return/eval", "return/eval_std"]
    assert [(e.step, e.value) for e in events.Scalars("return/eval")] == [(300, -812.5), (600, -150.25)]


def test_the_hyperparameter_record_is_the_runs_own_row(tmp_path):
    log = RunLog(tmp_path)
    log.hyperparameters({"env.id": "Pendulum-v1", "seed": 3, "agent.temperature.target_entropy": -1.0})
    log.close()
    content = _read(tmp_path).PluginTagToContent("hparams")
    assert set(content) == {"_hparams_/experiment", "_hparams_/session_start_info", "_hparams_/session_end_info"}
    experiment = plugin_data_pb2.HParamsPluginData.FromString(content["_hparams_/experiment"]).experiment
    assert [h.name for h in experiment.hparam_infos] == ["env.id", "seed", "agent.temperature.target_entropy"]
    assert [m.name.tag for m in experiment.metric_infos] == list(FINAL_METRICS)
    assert list(FINAL_METRICS) == ["final/return_eval", "final/entropy", "final/alpha"]
    session = plugin_data_pb2.HParamsPluginData.FromString(content["_hparams_/session_start_info"]).session_start_info
    assert session.hparams["env.id"].string_value == "Pendulum-v1"
    assert session.hparams["seed"].number_value == 3.0
    assert session.hparams["agent.temperature.target_entropy"].number_value == -1.0


def test_a_resumed_log_drops_what_the_killed_attempt_logged_after_its_checkpoint(tmp_path):
    killed = RunLog(tmp_path)
    for step, value in ((100, 1.0), (200, 2.0), (300, 3.0), (400, 4.0)):
        killed.scalars({"critic/td_mse": value}, step)
    killed.close()
    # TensorBoard reads a folder's event files in name order, and a name starts with its creation time
    # in whole seconds (torch.utils.tensorboard's EventFileWriter): a resumed attempt is a later
    # process, so its file is at least a second younger. (Within one second the names would order by
    # a per-process counter, which sorts as text.)
    time.sleep(1.1)
    resumed = RunLog(tmp_path, resume_after=200)  # the checkpoint was at step 200
    resumed.scalars({"critic/td_mse": 30.0}, 300)
    resumed.close()
    steps = [(e.step, e.value) for e in _read(tmp_path).Scalars("critic/td_mse")]
    assert steps == [(100, 1.0), (200, 2.0), (300, 30.0)]  # each step once, the resumed attempt's


@pytest.mark.parametrize("value", [float("nan"), float("inf")])
def test_a_non_finite_final_number_is_logged_as_is(tmp_path, value):
    # A run without an entropy figure logs NaN for it (kiln.training.trainer): TensorBoard keeps it.
    log = RunLog(tmp_path)
    log.scalars({"final/entropy": value}, 10)
    log.flush()
    (event,) = _read(tmp_path).Scalars("final/entropy")
    assert (event.step, str(event.value)) == (10, str(value))
    log.close()

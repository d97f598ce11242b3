"""TaskSpec: the task a run or a saved policy names, and its JSON record."""

import json

import pytest

from kiln.envs.task_error import TaskError
from kiln.envs.task_spec import TaskSpec


def test_record_round_trips_through_json():
    spec = TaskSpec("kiln/FiringHold-v0", {"state_cost": [[1.0, 0.0], [0.0, 0.5]], "start_std": 0.5}, 80)
    record = json.loads(json.dumps(spec.to_record()))
    # The saved policy's spec.json holds exactly these three keys under "env" (README, "Evaluation": spec.json records the task).
    assert record == {
        "id": "kiln/FiringHold-v0",
        "kwargs": {"state_cost": [[1.0, 0.0], [0.0, 0.5]], "start_std": 0.5},
        "max_episode_steps": 80,
    }
    assert TaskSpec.from_record(record) == spec


def test_record_needs_only_an_id():
    assert TaskSpec.from_record({"id": "Pendulum-v1", "kwargs": None}) == TaskSpec("Pendulum-v1", {}, None)


def test_spec_keeps_its_own_copy_of_the_options():
    options = {"stiffness": 2.0}
    spec = TaskSpec("kiln/DamperTrim-v0", options)
    options["stiffness"] = 9.0
    assert spec.kwargs == {"stiffness": 2.0}


@pytest.mark.parametrize(
    "record,match",
    [
        ({"kwargs": {}}, "needs at least an id"),
        ("Pendulum-v1", "needs at least an id"),
        ({"id": "Pendulum-v1", "name": "pendulum"}, r"unknown key\(s\) \['name'\]"),
        ({"id": ""}, "non-empty string"),
        ({"id": "Pendulum-v1", "kwargs": [1, 2]}, "mapping"),
        ({"id": "Pendulum-v1", "max_episode_steps": 0}, "max_episode_steps"),
        ({"id": "Pendulum-v1", "max_episode_steps": 2.5}, "max_episode_steps"),
        ({"id": "Pendulum-v1", "max_episode_steps": True}, "max_episode_steps"),
    ],
)
def test_bad_records_are_refused_in_one_line(record, match):
    with pytest.raises(TaskError, match=match) as info:
        TaskSpec.from_record(record)
    assert "\n" not in str(info.value)

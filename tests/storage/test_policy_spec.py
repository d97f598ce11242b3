"""A policy folder whose files are not what they claim is refused with one line, before anything
large is built and without unpickling or importing anything (requirements of the project, README.md
"Bad input": policy folders are checked before anything is built from them, and never unpickled;
the crafted files are this test's own)."""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

import gymnasium as gym
import numpy as np
import pytest
import torch
from safetensors.torch import save_file

from kiln.errors import PolicyFolderError
from kiln.learner.actor import SquashedGaussianActor
from kiln.storage import policy_io
from kiln.storage.policy_io import SPEC, WEIGHTS, actor_tensors, build_spec, load_policy, save_policy
from kiln.storage.policy_spec import actor_shape, tensor_names
from tests.support.pickle_bomb import pickle_bomb, torch_bomb

ENV = {"id": "Pendulum-v1", "kwargs": {}, "max_episode_steps": None}


def _saved(root: Path) -> tuple[SquashedGaussianActor, Path]:
    actor = SquashedGaussianActor(3, 1, (8, 8), "relu", (-20.0, 2.0), torch.Generator().manual_seed(0))
    obs_space = gym.spaces.Box(-np.inf, np.inf, (3,), np.float32)
    act_space = gym.spaces.Box(-2.0, 2.0, (1,), np.float32)
    config = {"seed": 0, "evaluate": {"episodes": 1}}
    return actor, save_policy(root / "policy", actor, build_spec(actor, obs_space, act_space, ENV, config))


def _spec_edit(edit: Callable[[dict[str, Any]], None]) -> Callable[[Path, Path], None]:
    def apply(folder: Path, marker: Path) -> None:
        spec = json.loads((folder / SPEC).read_text())
        edit(spec)
        (folder / SPEC).write_text(json.dumps(spec))

    return apply


def _spec_bytes(data: bytes) -> Callable[[Path, Path], None]:
    return lambda folder, marker: (folder / SPEC).write_bytes(data)


def _weights(change: Callable[[dict[str, torch.Tensor]], None]) -> Callable[[Path, Path], None]:
    def apply(folder: Path, marker: Path) -> None:
        tensors = actor_tensors(_saved(folder.parent / "other")[0])
        change(tensors)
        save_file(tensors, str(folder / WEIGHTS))

    return apply


def _set(path: str, value: Any) -> Callable[[dict[str, Any]], None]:
    def edit(spec: dict[str, Any]) -> None:
        *parents, last = path.split(".")
        node = spec
        for part in parents:
            node = node[part]
        node[last] = value

    return edit


def _truncate(folder: Path, marker: Path) -> None:
    data = (folder / WEIGHTS).read_bytes()
    (folder / WEIGHTS).write_bytes(data[: len(data) // 2])


def _nan(tensors: dict[str, torch.Tensor]) -> None:
    tensors["layers.0.weight"][0, 0] = float("nan")


def _inf(tensors: dict[str, torch.Tensor]) -> None:
    tensors["layers.2.bias"][0] = float("inf")


def _reshape(tensors: dict[str, torch.Tensor]) -> None:
    tensors["layers.1.weight"] = torch.zeros(8, 9)


def _double(tensors: dict[str, torch.Tensor]) -> None:
    tensors["layers.0.bias"] = tensors["layers.0.bias"].double()


CASES = {
    # The weights file.
    "weights are a pickle": (lambda f, m: (f / WEIGHTS).write_bytes(pickle_bomb(m)), "cannot be read as safetensors"),
    "weights are a torch.save file": (lambda f, m: (f / WEIGHTS).write_bytes(torch_bomb(m)), "cannot be read as safetensors"),
    "weights truncated": (_truncate, "cannot be read as safetensors"),
    "weights zero bytes": (lambda f, m: (f / WEIGHTS).write_bytes(b""), "is empty"),
    "weights of another shape": (_weights(_reshape), "does not match the network in spec.json"),
    "weights as float64": (_weights(_double), "float32"),
    "NaN weight": (_weights(_nan), "NaN or infinite"),
    "infinite weight": (_weights(_inf), "NaN or infinite"),
    # spec.json's bytes.
    "spec is a pickle": (lambda f, m: (f / SPEC).write_bytes(pickle_bomb(m)), "not UTF-8 text"),
    "spec is invalid UTF-8": (_spec_bytes(b'{"format": "\xff\xfe"}'), "not UTF-8 text"),
    "spec is an empty list": (_spec_bytes(b"[]"), "not a JSON object"),
    "spec is a number": (_spec_bytes(b"3"), "not a JSON object"),
    "spec is nested too deep": (_spec_bytes(b"[" * 200_000), "nested too deeply"),
    "spec is too large": (_spec_bytes(b"{" + b" " * (5 * 2**20) + b"}"), "larger than"),
    "spec holds NaN": (_spec_bytes(b'{"format": NaN}'), "NaN"),
    "spec holds a 5000-digit number": (_spec_bytes(b'{"format_version": 1' + b"0" * 5000 + b"}"), "number"),
    # spec.json's fields.
    "format_version is a string": (_spec_edit(_set("format_version", "2")), "format_version must be an integer"),
    "format_version is huge": (_spec_edit(_set("format_version", 10**30)), "newer than this Kiln reads"),
    "actor block is a list": (_spec_edit(_set("actor", [])), "actor must be a JSON object"),
    "observation_size is huge": (_spec_edit(_set("actor.observation_size", 10**30)), "actor.observation_size must be an integer from 1 to"),
    "observation_size is a float": (_spec_edit(_set("actor.observation_size", 3.5)), "actor.observation_size must be an integer"),
    "action_size is zero": (_spec_edit(_set("actor.action_size", 0)), "actor.action_size must be an integer from 1 to"),
    "a layer width of 10**9": (_spec_edit(_set("actor.layer_widths", [10**9])), "actor.layer_widths[0] must be an integer from 1 to"),
    "widths within the cap but 3.6e9 weights": (_spec_edit(_set("actor.layer_widths", [60000, 60000])), "weights"),
    "a thousand layers": (_spec_edit(_set("actor.layer_widths", [8] * 1000)), "actor.layer_widths may hold at most"),
    "layer_widths is text": (_spec_edit(_set("actor.layer_widths", "8,8")), "actor.layer_widths must be a list"),
    "unknown nonlinearity": (_spec_edit(_set("actor.nonlinearity", "os.system")), "actor.nonlinearity must be one of"),
    "NaN log-std limit": (_spec_edit(_set("actor.log_std_soft_limits", ["nan", 2.0])), "actor.log_std_soft_limits"),
    "log-std limits reversed": (_spec_edit(_set("actor.log_std_soft_limits", [2.0, -20.0])), "actor.log_std_soft_limits"),
    "NaN action bound": (_spec_edit(_set("action_space.low", ["nan"])), "action_space.low"),
    "infinite action bound": (_spec_edit(_set("action_space.high", ["inf"])), "action_space.high"),
    "action low above high": (_spec_edit(_set("action_space.low", [3.0])), "above action_space.high"),
    "action bounds of another size": (_spec_edit(_set("action_space.low", [-2.0, -2.0])), "action_space.low must hold 1"),
    "action shape against action_size": (_spec_edit(_set("action_space.shape", [2])), "action_space.shape"),
    "observation shape against observation_size": (_spec_edit(_set("observation_space.shape", [4])), "observation_space.shape"),
    "NaN observation bound": (_spec_edit(_set("observation_space.low", ["nan", 0, 0])), "observation_space.low"),
    "bound as arbitrary text": (_spec_edit(_set("observation_space.low", ["1e999", 0, 0])), "observation_space.low"),
    "env id climbs folders": (_spec_edit(_set("env.id", "../../etc/passwd")), "task id"),
    "env id with a space and newline": (_spec_edit(_set("env.id", "Pendulum v1\nx")), "task id"),
    "env id with a bad module name": (_spec_edit(_set("env.id", "os/../x:Pendulum-v1")), "task id"),
    "config is a list": (_spec_edit(_set("config", [])), "config must be a JSON object"),
}


@pytest.mark.parametrize("name", list(CASES))
def test_bad_file_is_refused_in_one_line_without_unpickling(tmp_path: Path, name: str) -> None:
    _, folder = _saved(tmp_path)
    marker = tmp_path / "marker"
    damage, phrase = CASES[name]
    damage(folder, marker)
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    with pytest.raises(PolicyFolderError) as caught:
        load_policy(folder)
    message = str(caught.value)
    assert phrase in message and "\n" not in message, message
    assert len(message) < 400, message  # a line a person reads, not a dump of the file
    assert not marker.exists()
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before


@pytest.mark.parametrize("widths", [[10**9], [60000, 60000], [65536, 65536, 65536]])
def test_absurd_widths_are_refused_before_the_network_is_built(tmp_path, monkeypatch, widths) -> None:
    _, folder = _saved(tmp_path)
    _spec_edit(_set("actor.layer_widths", widths))(folder, tmp_path / "marker")

    def refuse_to_build(*args: Any, **kwargs: Any) -> None:
        raise AssertionError("the network was built before its size was checked")

    monkeypatch.setattr(policy_io, "SquashedGaussianActor", refuse_to_build)
    with pytest.raises(PolicyFolderError):
        load_policy(folder)


def test_a_good_folder_still_loads_after_all_checks(tmp_path: Path) -> None:
    actor, folder = _saved(tmp_path)
    policy = load_policy(folder)
    obs = np.array([0.1, -0.2, 0.3], np.float32)
    # The action scale maps tanh's (-1, 1) onto the bounds [-2, 2]: a = 2 tanh(mean).
    expected = 2.0 * torch.tanh(actor(torch.tensor(obs).unsqueeze(0))[0])[0].detach().numpy()
    np.testing.assert_allclose(policy.act(obs), expected, rtol=1e-6, atol=1e-6)


def test_actor_shape_knows_every_tensor_before_anything_is_built(tmp_path: Path) -> None:
    # Hand arithmetic for obs 3, widths [8, 8], 1 action: [3, 8], [8, 8], [8, 2·1] and their biases.
    _, folder = _saved(tmp_path)
    spec = json.loads((folder / SPEC).read_text())
    shape = actor_shape(spec["actor"], folder / SPEC)
    assert shape.tensor_shapes() == {
        "layers.0.weight": (3, 8), "layers.0.bias": (8,),
        "layers.1.weight": (8, 8), "layers.1.bias": (8,),
        "layers.2.weight": (8, 2), "layers.2.bias": (2,),
    }  # fmt: skip
    assert tensor_names(2) == ("layers.2.weight", "layers.2.bias")

"""Composing Kiln's presets (and a user's preset folders) into a plain run config, as the command line
does, and turning Hydra's composition errors into one line with the fix (DEVELOPERS.md, "Errors";
README.md, "Your own task and presets").

Expected values are read from the preset files themselves with PyYAML, an independent reader, or
written out by hand.
"""

import os

import pytest
import yaml

from kiln.config.presets import CONFIG_DIR, PRESETS_ENV, compose_config, compose_node, user_preset_dirs
from kiln.config.run_config import parse_run_config
from kiln.errors import KilnError


def _preset(group: str, name: str) -> dict:
    return yaml.safe_load((CONFIG_DIR / group / f"{name}.yaml").read_text())


def test_default_run_is_the_pendulum_preset_over_the_published_agent():
    raw = compose_config("train", [])
    pendulum, published = _preset("env", "pendulum"), _preset("agent", "published")
    # configs/train.yaml lists agent: published, then env: pendulum, which may tune agent keys.
    assert raw["env"] == pendulum["env"] and raw["steps"] == pendulum["steps"]
    assert raw["agent"]["layer_widths"] == pendulum["agent"]["layer_widths"]
    assert raw["agent"]["discount"] == published["discount"]
    assert raw["agent"]["temperature"]["target_entropy"] == published["temperature"]["target_entropy"]
    parse_run_config(raw)  # what the presets compose is a valid run config


def test_overrides_apply_as_on_the_command_line():
    raw = compose_config("train", ["env=damper_trim", "seed=5", "agent.temperature.mode=fixed"])
    assert raw["env"]["kwargs"] == _preset("env", "damper_trim")["env"]["kwargs"]
    assert raw["seed"] == 5 and raw["agent"]["temperature"]["mode"] == "fixed"


@pytest.mark.parametrize(
    "override,message",
    [
        ("agent.colour=1", "unknown config key 'agent.colour': check the spelling; `kiln train --cfg job` prints every key"),
        ("agent.hidden_sizes=[3]", "agent.hidden_sizes is an old name: use agent.layer_widths"),
        ("agent=sac", "agent=sac is an old name: use agent=published"),
        ("env=nosuch", "unknown env preset 'nosuch' (env/nosuch): choose one of damper_trim, firing_hold, "),
    ],
)
def test_composition_errors_are_one_line_with_the_fix(override, message):
    with pytest.raises(KilnError) as info:
        compose_config("train", [override])
    assert message in str(info.value) and "\n" not in str(info.value)


def test_unknown_preset_lists_the_preset_folders(monkeypatch):
    monkeypatch.delenv(PRESETS_ENV, raising=False)
    with pytest.raises(KilnError) as info:
        compose_config("train", ["env=nosuch"])
    assert str(info.value).endswith(f"(preset folders: {CONFIG_DIR})")


def test_user_preset_folder_adds_and_replaces_presets(tmp_path, monkeypatch):
    (tmp_path / "env").mkdir()
    # A preset of the user's own, and one that replaces Kiln's pendulum preset of the same name.
    (tmp_path / "env" / "point.yaml").write_text(
        "# @package _global_\nenv:\n  id: Pendulum-v1\n  name: point\n  max_episode_steps: 50\n  kwargs: {}\n"
    )
    (tmp_path / "env" / "pendulum.yaml").write_text(
        "# @package _global_\nenv:\n  id: Pendulum-v1\n  name: mine\n  max_episode_steps: null\n  kwargs: {}\n"
    )
    monkeypatch.setenv(PRESETS_ENV, str(tmp_path))
    assert user_preset_dirs() == [tmp_path.resolve()]
    assert compose_config("train", ["env=point"])["env"]["max_episode_steps"] == 50
    assert compose_config("train", [])["env"]["name"] == "mine"  # searched before configs/
    with pytest.raises(KilnError) as info:
        compose_config("train", ["env=nosuch"])
    assert f"(preset folders: {tmp_path.resolve()}, {CONFIG_DIR})" in str(info.value)
    monkeypatch.delenv(PRESETS_ENV)
    assert compose_config("train", [])["env"]["name"] == "pendulum"  # Kiln's own again


def test_preset_folders_follow_the_path_separator_and_skip_empty_entries(tmp_path, monkeypatch):
    first, second = tmp_path / "a", tmp_path / "b"
    first.mkdir()
    second.mkdir()
    # os.pathsep separates entries as in PATH; an empty entry (a trailing separator) means nothing.
    monkeypatch.setenv(PRESETS_ENV, f"{first}{os.pathsep}{os.pathsep}{second}{os.pathsep}")
    assert user_preset_dirs() == [first.resolve(), second.resolve()]


def test_a_preset_folder_that_does_not_exist_is_refused(tmp_path, monkeypatch):
    monkeypatch.setenv(PRESETS_ENV, str(tmp_path / "missing"))
    with pytest.raises(KilnError) as info:
        compose_config("train", [])
    assert str(info.value) == (
        f"preset folder {tmp_path / 'missing'} (from {PRESETS_ENV} or --presets) is not a folder: "
        "create it or name an existing folder that holds env/, agent/ or sweep/ presets"
    )


def test_node_keeps_hydra_settings_only_on_request():
    node = compose_node("train", ["sweep=target_entropy"], with_hydra=True)
    # configs/sweep/target_entropy.yaml: sweeps/${env.name}_target_entropy, with env.name pendulum.
    written = _preset("sweep", "target_entropy")["hydra"]["sweep"]["dir"]
    assert written == "sweeps/${env.name}_target_entropy"
    assert node.hydra.sweep.dir == "sweeps/pendulum_target_entropy"
    assert "hydra" not in compose_node("train", [])


def test_run_folder_token_is_stable_within_one_config():
    # ${kiln_token:} is a few random hex digits, cached per config: once composed, the run folder's name
    # does not change (secrets.token_hex(3): 3 random bytes, 6 hex digits).
    node = compose_node("train", [], with_hydra=True)
    first, again = str(node.hydra.run.dir), str(node.hydra.run.dir)
    assert first == again
    token = first.rsplit("_", 1)[1]
    assert len(token) == 6 and int(token, 16) >= 0
    assert first.startswith("runs/pendulum/") and "_seed0_" in first

"""Renamed config keys and presets: the old name is refused with the new one, in one line, wherever it
is used (a config file through the parser, an override through the command-line check).

The expected words are written out by hand; README.md, "Training", lists the current names and says an
earlier Kiln's key is refused with one line naming the key to use now.
"""

import pytest

from kiln.config.agent_settings import AgentSettings
from kiln.config.renamed import OLD_KEYS, refuse_old_keys, renamed_message, renamed_preset_message
from kiln.errors import ConfigError


@pytest.mark.parametrize(
    "old,new",
    [
        ("agent.hidden_sizes", "agent.layer_widths"),
        ("agent.activation", "agent.nonlinearity"),
        ("agent.critics", "agent.critic.count"),
        ("agent.temperature.initial", "agent.temperature.start"),
        ("collect.updates_per_step", "collect.updates_per_env_step"),
    ],
)
def test_old_key_names_the_new_one(old, new):
    assert renamed_message(old) == f"{old} is an old name: use {new}"


def test_hydra_override_prefixes_are_ignored():
    # Hydra's grammar: +key adds, ++key forces, ~key deletes; the key is the same either way.
    for prefix in ("+", "++", "~"):
        assert renamed_message(prefix + "agent.actor_lr") == "agent.actor_lr is an old name: use agent.actor.lr"


def test_current_and_unknown_keys_are_not_renamed():
    assert renamed_message("agent.layer_widths") is None
    assert renamed_message("agent.no_such_key") is None


def test_every_new_name_is_a_current_setting():
    # The table must point at keys that exist: walk each new name through the settings' fields.
    for new in OLD_KEYS.values():
        path = new.split(" ")[0].split(".")  # "agent.temperature.mode (tuned | fixed)" names agent.temperature.mode
        if path[0] != "agent":
            continue  # run-level keys (collect.*) are checked by tests/config/test_run_config.py
        node = AgentSettings()
        for part in path[1:]:
            assert hasattr(node, part), new
            node = getattr(node, part)


def test_refuse_old_keys_raises_for_the_first_old_key_of_a_section():
    refuse_old_keys({"lr": 1e-3, "count": 2}, "agent.critic")  # current names pass
    with pytest.raises(ConfigError) as info:
        refuse_old_keys({"discount": 0.99, "critic_lr": 1e-3}, "agent")
    assert str(info.value) == "agent.critic_lr is an old name: use agent.critic.lr"


def test_renamed_preset_is_recognised_in_hydra_error_text():
    # Hydra's "Could not find 'agent/sac'" message quotes the missing option as group/name.
    text = "In 'train': Could not find 'agent/sac'\n\nAvailable options in 'agent':\n\tpublished"
    assert renamed_preset_message(text) == "agent=sac is an old name: use agent=published"
    assert renamed_preset_message("Could not find 'agent/mine'") is None

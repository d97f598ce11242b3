"""Agent settings read from a plain mapping, and the target entropy resolved against the action size.

The published defaults themselves (Haarnoja et al. 2018, arXiv 1812.05905, Table 1) are checked in
tests/config/test_published_defaults.py; here, what a given value becomes and how a bad one is refused
(one line naming the key and the fix, DEVELOPERS.md, "Errors").
"""

import pytest

from kiln.config.agent_settings import AgentSettings, TemperatureSettings, resolve_target_entropy
from kiln.errors import ConfigError


def _refused(data) -> str:
    with pytest.raises(ConfigError) as info:
        AgentSettings.from_mapping(data)
    assert "\n" not in str(info.value)
    return str(info.value)


def test_given_values_replace_defaults_and_the_rest_stay():
    settings = AgentSettings.from_mapping(
        {"layer_widths": [64, 32], "critic": {"count": 3}, "temperature": {"mode": "fixed", "start": 0.2}}
    )
    assert settings.layer_widths == (64, 32) and settings.critic.count == 3
    assert settings.temperature.mode == "fixed" and not settings.temperature.tuned and settings.temperature.start == 0.2
    # Untouched keys keep Table 1's values: lr 3·10⁻⁴, γ 0.99, τ 0.005.
    assert settings.actor.lr == 3e-4 and settings.discount == 0.99 and settings.critic.target_smoothing == 0.005


def test_an_empty_or_null_group_keeps_its_defaults():
    assert AgentSettings.from_mapping({"actor": None, "critic": {}}) == AgentSettings()


@pytest.mark.parametrize(
    "data,message",
    [
        ({"widths": [64]}, "unknown config key agent.widths: known keys here are"),
        ({"critic": {"number": 2}},
         "unknown config key agent.critic.number: known keys here are ['count', 'lr', 'target_smoothing']"),
        ({"critic": 2}, "agent.critic must be a group of keys, got 2: see configs/agent/published.yaml"),
        ({"hidden_sizes": [64]}, "agent.hidden_sizes is an old name: use agent.layer_widths"),
        ({"temperature": {"tune": True}}, "agent.temperature.tune is an old name: use agent.temperature.mode (tuned | fixed)"),
        ({"discount": 1.0}, "agent.discount must be in [0, 1), got 1.0"),
        ({"batch_size": 2.5}, "agent.batch_size must be an integer, got 2.5"),
        ({"nonlinearity": "sigmoid"}, "agent.nonlinearity must be one of elu | relu | silu | tanh, got 'sigmoid'"),
        ({"critic": {"target_smoothing": 0.0}}, "agent.critic.target_smoothing must be in (0, 1], got 0.0"),
        ({"temperature": {"mode": "auto"}}, "agent.temperature.mode must be one of tuned | fixed, got 'auto'"),
        ({"actor": {"log_std_soft_limits": [2, -20]}}, "agent.actor.log_std_soft_limits must be [low, high] with low < high"),
        ({"temperature": {"target_entropy": []}}, "agent.temperature.target_entropy is an empty list: give one number"),
        ({"temperature": {"target_entropy": [-1, "x"]}}, "agent.temperature.target_entropy[1] must be a finite number"),
        ({"temperature": {"target_entropy": "auto"}},
         "agent.temperature.target_entropy=auto is an old name: use agent.temperature.target_entropy=minus_action_dims"),
    ],
)
def test_bad_values_are_refused_naming_the_key(data, message):
    assert message in _refused(data)


def test_unknown_top_level_key_lists_the_groups_too():
    # The known keys at agent level are the fields of AgentSettings, the three groups included.
    message = _refused({"widths": [64]})
    for key in ("layer_widths", "discount", "actor", "critic", "temperature"):
        assert repr(key) in message


@pytest.mark.parametrize(
    "spec,act_dim,expected",
    [
        ("minus_action_dims", 6, (-6.0,)),  # −dim(A), Table 1 of Haarnoja et al. 2018
        (-0.5, 3, (-0.5,)),
        (2, 1, (2.0,)),
        ("-1.5", 2, (-1.5,)),  # a number written as text on the command line
        ((-1.0, -2.0, -0.5), 3, (-1.0, -2.0, -0.5)),  # one target per action dimension
    ],
)
def test_resolve_target_entropy(spec, act_dim, expected):
    assert resolve_target_entropy(spec, act_dim) == expected


@pytest.mark.parametrize(
    "spec,message",
    [
        ("auto",
         ("agent.temperature.target_entropy=auto is an old name: "
          "use agent.temperature.target_entropy=minus_action_dims (= −dim(A))")),
        ("lots",
         "agent.temperature.target_entropy='lots' is not understood: use minus_action_dims, a number, or a list of 2 numbers"),
        (True, "agent.temperature.target_entropy must be minus_action_dims, a number or a list, not a boolean"),
        ([-1.0, -1.0, -1.0],
         "agent.temperature.target_entropy has 3 entries but the action has 2 dimensions: give one number, or exactly 2"),
    ],
)
def test_resolve_target_entropy_refusals(spec, message):
    with pytest.raises(ConfigError) as info:
        resolve_target_entropy(spec, 2)
    assert str(info.value) == message


def test_a_checked_list_target_is_kept_as_a_tuple_until_resolved():
    # The length is checked where the action size is known (on resolving), not on parsing.
    settings = AgentSettings.from_mapping({"temperature": {"target_entropy": [-1, -2]}})
    assert settings.temperature.target_entropy == (-1.0, -2.0)
    assert TemperatureSettings().target_entropy == "minus_action_dims"


@pytest.mark.parametrize("value", [0, False, "", []])
def test_a_group_given_as_a_falsy_non_mapping_is_refused_not_read_as_empty(value):
    # Only a missing or null group keeps its defaults; 0, false, "" or [] is a typo (checks.py: a value
    # of the wrong kind is refused, never reinterpreted).
    assert _refused({"critic": value}) == f"agent.critic must be a group of keys, got {value!r}: see configs/agent/published.yaml"


@pytest.mark.parametrize("text", ["nan", "inf", "-1e999"])
def test_a_target_entropy_written_as_text_must_still_be_finite(text):
    # checks.py: every number must be finite; a number written as text ("-1.5") is read as that number,
    # so "nan" must be refused as the number nan is.
    expected = f"agent.temperature.target_entropy={text!r} must be a finite number: use minus_action_dims or a finite number"
    assert _refused({"temperature": {"target_entropy": text}}) == expected
    with pytest.raises(ConfigError) as info:
        resolve_target_entropy(text, 1)
    assert str(info.value) == expected


def test_a_target_entropy_written_as_text_has_the_range_of_a_number():
    # The same limits as a number (agent_settings._CHECKS: far outside any useful setting).
    assert _refused({"temperature": {"target_entropy": "1e7"}}).startswith(
        "agent.temperature.target_entropy must be in [-1e+06, 1e+06], got 10000000.0")
    assert AgentSettings.from_mapping({"temperature": {"target_entropy": "-1.5"}}).temperature.target_entropy == "-1.5"

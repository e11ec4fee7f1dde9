"""Settings: the declarative table is the one source, and the typed frozen object follows it exactly."""

from __future__ import annotations

import dataclasses
import typing

import pytest

from linkfold.errors import ConfigError
from linkfold.settings import SETTINGS, Settings, load_settings


def _env_text(value: object) -> str:
    # How a person would write the default in the environment variable.
    if isinstance(value, tuple):
        return ",".join(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def test_every_table_row_is_a_typed_field_and_every_field_a_row():
    names = [f.name for f in dataclasses.fields(Settings)]
    assert names == [s.name for s in SETTINGS], "Settings must list the table's rows, in the table's order"
    hints = typing.get_type_hints(Settings)
    for setting in SETTINGS:
        hint = hints[setting.name]
        assert hint in (str, int, float, bool, tuple[str, ...]), f"{setting.name}: {hint}"
        base = typing.get_origin(hint) or hint
        assert isinstance(setting.default, base), f"default of {setting.name} is not a {hint}"
        # The row's converter turns text into a value of the field's type (and back to the default).
        converted = setting.type(_env_text(setting.default))
        assert isinstance(converted, base) and converted == setting.default, setting.name


def test_defaults_and_environment_resolve_to_the_typed_object():
    settings = load_settings(environ={})
    assert isinstance(settings, Settings)
    assert all(getattr(settings, s.name) == s.default for s in SETTINGS)
    env = load_settings(environ={"LINKFOLD_NUM_PERM": "256", "LINKFOLD_ALLOW_NETWORKS": "10.0.0.0/8, 192.0.2.0/24",
                                 "LINKFOLD_OPEN_READS": "yes"})
    assert env.num_perm == 256 and env.allow_networks == ("10.0.0.0/8", "192.0.2.0/24") and env.open_reads is True


def test_settings_are_frozen_and_replaced_by_copy():
    settings = load_settings(environ={})
    with pytest.raises(dataclasses.FrozenInstanceError):
        settings.batch_size = 1  # type: ignore[misc]
    changed = settings.replace(batch_size=7, contact="mailto:lab@university.example")
    assert (changed.batch_size, settings.batch_size) == (7, 5000)
    assert changed.contact == "mailto:lab@university.example"
    assert hash(changed) != hash(settings) and changed == settings.replace(batch_size=7,
                                                                          contact="mailto:lab@university.example")
    with pytest.raises(ConfigError, match="unknown setting"):
        settings.replace(no_such_setting=1)


def test_values_of_the_wrong_type_are_refused_with_the_setting_named():
    settings = load_settings(environ={})
    with pytest.raises(ConfigError, match="batch_size must be int"):
        settings.replace(batch_size="many")
    with pytest.raises(ConfigError, match="open_reads must be bool"):
        load_settings(overrides={"open_reads": "no"}, environ={})
    assert settings.replace(http_timeout=2).http_timeout == 2  # an int is a float
    # A list from a caller is stored as the tuple the field declares (the object stays hashable).
    assert settings.replace(allow_networks=["127.0.0.0/8"]).allow_networks == ("127.0.0.0/8",)


def test_the_band_rule_holds_for_every_way_of_building_settings():
    with pytest.raises(ConfigError, match="exceeds num_perm"):
        load_settings(environ={"LINKFOLD_NUM_PERM": "16"})
    with pytest.raises(ConfigError, match="exceeds num_perm"):
        load_settings(environ={}).replace(num_perm=16)


def test_a_setting_can_still_be_read_by_name():
    settings = load_settings(environ={})
    assert settings["num_perm"] == settings.num_perm == 128
    with pytest.raises(KeyError):
        settings["replace"]

"""Presets: built-in conditions and vehicles, user TOML files, and the listing commands."""

from __future__ import annotations

import json

import pandas as pd
import pytest
from click.testing import CliRunner

from curvescan.cli.presets import conditions_command, vehicles_command
from curvescan.config import make_config
from curvescan.errors import ConfigError, InputError
from curvescan.physics import BUILTIN_CONDITIONS, BUILTIN_VEHICLES, evaluate, load_presets

STATUSES = {"V", "V-2nd", "M", "D", "common practice"}

USER_TOML = """
[conditions.slush]
friction = 0.30
friction_low = 0.20
friction_high = 0.40
source = "district skid survey (invented for this test)"

[conditions.dry]
friction = 0.80
friction_low = 0.70
friction_high = 0.90
source = "replacement dry value (invented for this test)"

[vehicles.gritter]
rollover_threshold_g = 0.42
source = "tilt-table test (invented for this test)"
tyre_pressure_kpa = 800
"""


@pytest.fixture
def user_file(tmp_path):
    path = tmp_path / "fleet.toml"
    path.write_text(USER_TOML)
    return path


def _write(tmp_path, text):
    path = tmp_path / "p.toml"
    path.write_text(text)
    return path


# --- built-ins ---------------------------------------------------------------------------------

def test_builtin_vehicles_cover_the_required_types():
    required = {"passenger-car", "suv", "pickup", "bus", "single-unit-truck",
                "tractor-semitrailer-empty", "tractor-semitrailer-loaded", "tanker-loaded"}
    assert required <= set(BUILTIN_VEHICLES)


def test_every_builtin_names_source_and_status():
    for preset in list(BUILTIN_VEHICLES.values()) + list(BUILTIN_CONDITIONS.values()):
        assert len(preset.source) > 20, preset.name
        assert preset.status in STATUSES, preset.name
    for v in BUILTIN_VEHICLES.values():
        if v.status == "M":
            assert "from memory" in v.source, v.name


def test_default_frictions_and_order():
    """REFERENCES.md 3 suggested defaults (D): dry 0.70, wet 0.45, snow 0.25, ice 0.10."""
    f = {n: c.friction for n, c in BUILTIN_CONDITIONS.items()}
    assert f == {"dry": 0.70, "wet": 0.45, "snow": 0.25, "ice": 0.10}
    for c in BUILTIN_CONDITIONS.values():
        assert c.friction_low <= c.friction <= c.friction_high


# --- user file ------------------------------------------------------------------------------------

def test_user_file_adds_and_replaces(user_file):
    presets = load_presets(user_file)
    assert presets.conditions["slush"].friction == 0.30
    assert presets.conditions["slush"].status == "user"
    assert presets.conditions["dry"].friction == 0.80
    assert presets.vehicles["gritter"].threshold_low_g == 0.42
    assert "passenger-car" in presets.vehicles


def test_user_condition_and_vehicle_reach_the_stage(user_file):
    curves = pd.DataFrame({"radius_m": [200.0], "superelevation": [0.06]})
    cfg = make_config(presets_file=str(user_file), conditions="slush", vehicle="gritter")
    out = evaluate(curves, cfg)
    assert {"v_slush_kmh", "v_slush_low_kmh", "mechanism_slush", "v_dry_kmh"} <= set(out.columns)
    assert out["v_ice_kmh"].iloc[0] < out["v_slush_kmh"].iloc[0] < out["v_wet_kmh"].iloc[0]


@pytest.mark.parametrize(
    "text,match",
    [
        ("[conditions.x\nfriction = 0.3", "not valid TOML"),
        ("[conditions.x]\nfriction = 0.3", "missing source"),
        ("[conditions.x]\nfriction = 0.3\nsource = 's'\ncolour = 'red'", "unknown key.*colour"),
        ("[conditions.x]\nfriction = 0.0\nsource = 's'", r"friction must be .* in \(0, 1.5\]"),
        ("[conditions.x]\nfriction = 1.6\nsource = 's'", r"friction must be .* in \(0, 1.5\]"),
        ("[conditions.x]\nfriction = 'high'\nsource = 's'", "friction must be a number"),
        ("[conditions.x]\nfriction = true\nsource = 's'", "friction must be a number"),
        ("[conditions.x]\nfriction = 0.3\nfriction_low = 0.4\nsource = 's'", "friction_low <="),
        ("[conditions.Bad-Name]\nfriction = 0.3\nsource = 's'", "condition name"),
        ("[vehicles.v]\nsource = 's'", "missing rollover_threshold_g"),
        ("[vehicles.v]\nrollover_threshold_g = -1\nsource = 's'", "rollover_threshold_g must be"),
        ("[vehicles.v]\nrollover_threshold_g = 0.5\nsource = 3", "source must be text"),
        ("[trucks.v]\nrollover_threshold_g = 0.5", "unknown top-level"),
        ("conditions = 3", "must be a table"),
        ("[conditions]\nx = 3", r"\[conditions.x\] must be a table"),
        ("[conditions.x]\nfriction = 0.3\nsource = 's'\nspeed_gradient_png = 'a'",
         "speed_gradient_png must be a number"),
        ("[conditions.x]\nfriction = 0.3\nsource = 's'\nreference_speed_kmh = '60'",
         "reference_speed_kmh must be a number"),
        # their columns would be those of the comfort or rollover limit, or of dry's band
        ("[conditions.comfort]\nfriction = 0.3\nsource = 's'", "'comfort' is reserved"),
        ("[conditions.rollover]\nfriction = 0.3\nsource = 's'", "'rollover' is reserved"),
        ("[conditions.dry_low]\nfriction = 0.3\nsource = 's'", "'dry_low' is reserved"),
        ("[conditions.Slush]\nfriction = 0.3\nsource = 's'\n"
         "[conditions.slush]\nfriction = 0.2\nsource = 's'", "name the same preset"),
    ],
)
def test_malformed_preset_files(tmp_path, text, match):
    with pytest.raises(ConfigError, match=match):
        load_presets(_write(tmp_path, text))


def test_preset_file_with_a_byte_order_mark_is_read(tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + USER_TOML.encode())
    assert load_presets(path).vehicle("gritter").rollover_threshold_g == 0.42


def test_preset_file_not_in_utf8_is_one_clear_error(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes("[vehicles.v]\nrollover_threshold_g = 0.5\nsource = 'caf\u00e9'\n"
                     .encode("latin-1"))
    with pytest.raises(ConfigError, match="not UTF-8 text"):
        load_presets(path)
    result = CliRunner().invoke(vehicles_command, ["--presets-file", str(path)])
    assert result.exit_code == 1 and "not UTF-8 text" in result.output


def test_missing_preset_file(tmp_path):
    with pytest.raises(ConfigError, match="cannot read"):
        load_presets(tmp_path / "absent.toml")


def test_error_messages_are_one_line(tmp_path):
    with pytest.raises(ConfigError) as info:
        load_presets(_write(tmp_path, "[conditions.x\nfriction = 0.3"))
    assert "\n" not in str(info.value)


def test_select_conditions_always_has_standard_four():
    names = [c.name for c in load_presets().select_conditions("ice")]
    assert names == ["dry", "wet", "snow", "ice"]
    with pytest.raises(InputError, match="known: dry, ice, snow, wet"):
        load_presets().select_conditions("dry, mud")


# --- listing commands ---------------------------------------------------------------------------

def test_vehicles_command_lists_values_and_sources():
    result = CliRunner().invoke(vehicles_command, [])
    assert result.exit_code == 0, result.output
    assert "tanker-loaded" in result.output and "0.40" in result.output
    assert "HS-809 868" in result.output and "1.41" in result.output


def test_conditions_command_lists_values_and_sources():
    result = CliRunner().invoke(conditions_command, [])
    assert result.exit_code == 0, result.output
    for name, value in (("dry", "0.70"), ("wet", "0.45"), ("snow", "0.25"), ("ice", "0.10")):
        assert name in result.output and value in result.output
    assert "Noon" in result.output and "Penn State" in result.output


def test_commands_include_user_file_and_json(user_file):
    result = CliRunner().invoke(conditions_command, ["--presets-file", str(user_file), "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["slush"]["friction"] == 0.30 and data["dry"]["friction"] == 0.80
    result = CliRunner().invoke(vehicles_command, ["--presets-file", str(user_file)])
    assert "gritter" in result.output and "0.42" in result.output


def test_commands_report_bad_files(tmp_path):
    bad = _write(tmp_path, "[vehicles.v]\nsource = 's'")
    result = CliRunner().invoke(vehicles_command, ["--presets-file", str(bad)])
    assert result.exit_code == 1
    assert "missing rollover_threshold_g" in result.output
    result = CliRunner().invoke(vehicles_command, ["--presets-file", str(tmp_path / "no.toml")])
    assert result.exit_code == 2

"""Posted-speed parsing: numbers, units, OSM maxspeed conventions, bad values.

Unit factors are definitions, not measurements: 1 mile = 1609.344 m exactly (International
Yard and Pound Agreement, 1959), 1 nautical mile = 1852 m exactly (International
Hydrographic Conference, 1929), so 1 mph = 1.609344 km/h and 1 kn = 1.852 km/h.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from curvescan.errors import ConfigError, DataQualityWarning
from curvescan.speeds import load_speed_table, parse_speeds

MPH = 1.609344  # km/h per mph, exact by definition (see module docstring)
KN = 1.852  # km/h per knot, exact by definition

TABLE = [
    # value, unit of bare numbers, expected km/h (NaN: unknown)
    ("50", "kmh", 50.0),
    (50, "kmh", 50.0),
    (72.5, "kmh", 72.5),
    ("50 km/h", "kmh", 50.0),
    ("50km/h", "kmh", 50.0),
    ("50 KPH", "kmh", 50.0),
    ("50 kmh", "mph", 50.0),  # explicit unit wins over the bare-number unit
    ("30 mph", "kmh", 30 * MPH),
    ("30mph", "kmh", 30 * MPH),
    ("30 MPH", "kmh", 30 * MPH),
    ("30 mi/h", "kmh", 30 * MPH),
    ("30", "mph", 30 * MPH),
    (30, "mph", 30 * MPH),
    ("20 knots", "kmh", 20 * KN),
    ("20 kn", "kmh", 20 * KN),
    ("  60  ", "kmh", 60.0),
    ("60,5", "kmh", 60.5),
    ("none", "kmh", np.nan),  # OSM: no limit -> unknown unless speed_none_kmh
    ("signals", "kmh", np.nan),  # OSM: variable signs -> unknown
    ("variable", "kmh", np.nan),
    ("50;70", "kmh", 70.0),  # several values: the highest
    ("30 mph;40 mph", "kmh", 40 * MPH),
    ("fast", "kmh", np.nan),
    ("national", "kmh", np.nan),  # no country code: not guessed
    ("60;x", "kmh", np.nan),
    ("", "kmh", np.nan),
    (None, "kmh", np.nan),
    (np.nan, "kmh", np.nan),
    ("999", "kmh", np.nan),  # absurd
    ("-30", "kmh", np.nan),
    ("0", "kmh", np.nan),
    ("150 mph", "kmh", np.nan),  # 241 km/h > 200 km/h
]


@pytest.mark.parametrize("value, unit, expected", TABLE)
def test_parse_table(value, unit, expected):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        out, _ = parse_speeds([value], unit)
    assert out.shape == (1,)
    if np.isnan(expected):
        assert np.isnan(out[0])
    else:
        assert out[0] == pytest.approx(expected, rel=1e-12)


def test_implicit_country_codes_from_table():
    """OSM country-coded values through the editable table. DE:urban 50, DE:rural 100 and
    GB:nsl_single 60 mph are from memory (OSM wiki "Default speed limits")."""
    out, rep = parse_speeds(["DE:urban", "de:rural", "GB:nsl_single", "DE:motorway", "walk"])
    assert out[:3] == pytest.approx([50.0, 100.0, 60 * MPH])
    assert np.isnan(out[3])  # DE:motorway = none: no limit, unknown
    assert out[4] == pytest.approx(7.0)  # walk: keyword table (common practice reading)
    assert rep["implicit"] == 3 and rep["no_limit"] == 1 and rep["keyword"] == 1


def test_user_table_adds_and_replaces(tmp_path):
    path = tmp_path / "speeds.toml"
    path.write_text('[speeds]\n"XX:rural" = "77"\n"DE:urban" = "30 mph"\n')
    out, rep = parse_speeds(["XX:rural", "DE:urban", "DE:rural"], table_file=str(path))
    assert out == pytest.approx([77.0, 30 * MPH, 100.0])
    assert rep["implicit_table"] == str(path)


def test_bad_table_file_is_a_config_error(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text('[limits]\n"XX:rural" = "77"\n')
    with pytest.raises(ConfigError, match="unknown table"):
        load_speed_table(str(path))
    path2 = tmp_path / "broken.toml"
    path2.write_text("[speeds\n")
    with pytest.raises(ConfigError):
        load_speed_table(str(path2))


def test_table_file_in_another_encoding_or_shape_is_a_config_error(tmp_path):
    latin1 = tmp_path / "latin1.toml"
    latin1.write_bytes('[keywords]\n"caf\u00e9" = "20"\n'.encode("latin-1"))
    with pytest.raises(ConfigError, match="not UTF-8 text"):
        load_speed_table(str(latin1))
    flat = tmp_path / "flat.toml"
    flat.write_text("speeds = 3\n")
    with pytest.raises(ConfigError, match="'speeds' must be a table"):
        load_speed_table(str(flat))
    bom = tmp_path / "bom.toml"
    bom.write_bytes(b"\xef\xbb\xbf" + b'[speeds]\n"XX:rural" = "77"\n')
    assert load_speed_table(str(bom))["speeds"]["xx:rural"] == "77"


def test_none_speed_setting():
    out, rep = parse_speeds(["none", "50"], none_kmh=130.0)
    assert out == pytest.approx([130.0, 50.0])
    assert rep["no_limit"] == 1 and rep["no_limit_kmh"] == 130.0


def test_absurd_values_warned_counted_kept_as_unknown():
    values = ["50", "999", "-30", "0", "80"]
    with pytest.warns(DataQualityWarning, match="zero, negative or above 200 km/h"):
        out, rep = parse_speeds(values)
    assert len(out) == len(values)  # nothing dropped
    assert rep["absurd"] == 3
    assert set(rep["absurd_values"]) == {"999", "-30", "0"}
    assert np.isnan(out[1:4]).all() and out[4] == 80.0


def test_mixed_units_warned():
    with pytest.warns(DataQualityWarning, match="mixes units"):
        _, rep = parse_speeds(["50", "30 mph", "60"])
    assert rep["mixed_units"] and rep["units"] == {"bare": 2, "kmh": 0, "mph": 1, "knots": 0}


def test_one_unit_is_not_mixed():
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataQualityWarning)
        _, rep = parse_speeds(["30 mph", "40 mph", "50"], "mph")
    assert not rep["mixed_units"]


def test_unparsable_listed_with_counts():
    out, rep = parse_speeds(["fast", "fast", "slow", "50", None, ""])
    assert rep["unparsed"] == 3 and rep["missing"] == 2 and rep["parsed"] == 1
    assert rep["unparsed_values"] == {"fast": 2, "slow": 1}
    assert len(out) == 6


def test_several_values_warned():
    with pytest.warns(DataQualityWarning, match="several speeds"):
        _, rep = parse_speeds(["50;70"])
    assert rep["multiple"] == 1


def test_many_rows_parse_by_unique_value():
    values = np.array(["50", "30 mph", "DE:rural", None] * 25_000, dtype=object)
    out, rep = parse_speeds(values)
    assert len(out) == 100_000
    assert rep["parsed"] == 75_000 and rep["missing"] == 25_000

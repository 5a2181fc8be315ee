"""The command line: exit codes 0/1/2, one-line errors, outputs, cautions, demo."""

from __future__ import annotations

import pyogrio
import pytest

from curvescan.cli.main import main
from curvescan.export import CONTRACT_FIELDS


@pytest.fixture
def roads_file(tmp_path, curve_layer):
    path = tmp_path / "roads.gpkg"
    curve_layer.to_file(path, layer="roads")
    return path


def test_scan_writes_contract_layers(runner, roads_file, tmp_path):
    out = tmp_path / "out.gpkg"
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(out), "--speed-field",
                               "maxspeed"])
    assert res.exit_code == 0, res.output
    layers = dict(pyogrio.list_layers(out))
    assert {"curves", "segments", "hazards", "run"} <= set(layers)
    info = pyogrio.read_info(out, layer="curves")
    assert set(CONTRACT_FIELDS) <= set(info["fields"])
    assert "curves found: 1" in res.output
    assert "CAUTION" in res.output


def test_existing_output_needs_overwrite(runner, roads_file, tmp_path):
    out = tmp_path / "out.gpkg"
    out.write_bytes(b"keep me")
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(out)])
    assert res.exit_code == 1
    assert "output exists" in res.output and "--overwrite" in res.output
    assert out.read_bytes() == b"keep me"
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(out), "--overwrite"])
    assert res.exit_code == 0, res.output


def test_bad_usage_exit_2(runner, roads_file, tmp_path):
    out = str(tmp_path / "o.gpkg")
    res = runner.invoke(main, ["scan", str(roads_file), "-o", out, "--max-radius-m", "-5"])
    assert res.exit_code == 2
    assert "below the minimum" in res.output
    res = runner.invoke(main, ["scan", str(roads_file), "-o", out, "--speed-unit", "knots"])
    assert res.exit_code == 2
    res = runner.invoke(main, ["scan", str(roads_file)])
    assert res.exit_code == 2 and "-o OUT.gpkg" in res.output


def test_unknown_field_lists_fields(runner, roads_file, tmp_path):
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg"),
                               "--speed-field", "speedlimit"])
    assert res.exit_code == 1
    assert "'speedlimit' not found" in res.output and "maxspeed" in res.output
    assert "Traceback" not in res.output


def test_missing_input_and_unwritable_folder(runner, roads_file, tmp_path, monkeypatch):
    res = runner.invoke(main, ["scan", str(tmp_path / "nope.gpkg"), "-o", str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1 and "input not found" in res.output
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "no" / "o.gpkg")])
    assert res.exit_code == 1 and "output folder does not exist" in res.output
    # root may write anywhere, so simulate a read-only folder at the access check
    import curvescan.io.vector as vector

    monkeypatch.setattr(vector.os, "access", lambda path, mode: False)
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1 and "not writable" in res.output


def test_missing_crs_one_line_error(runner, tmp_path, curve_layer):
    path = tmp_path / "nocrs.shp"
    curve_layer.set_crs(None, allow_override=True).to_file(path)
    res = runner.invoke(main, ["scan", str(path), "-o", str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1
    assert "no CRS" in res.output and len(res.output.strip().splitlines()) == 1
    res = runner.invoke(main, ["scan", str(path), "-o", str(tmp_path / "o.gpkg"),
                               "--assume-crs", "EPSG:32632"])
    assert res.exit_code == 0, res.output


def test_projected_coordinates_in_geojson(runner, tmp_path, curve_layer):
    path = tmp_path / "wrong.geojson"
    curve_layer.set_crs(None, allow_override=True).to_file(path)  # GeoJSON means WGS 84
    res = runner.invoke(main, ["scan", str(path), "-o", str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1 and "not longitude/latitude" in res.output


def test_verbose_shows_traceback(runner, tmp_path):
    res = runner.invoke(main, ["-v", "scan", str(tmp_path / "nope.gpkg"), "-o",
                               str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1
    assert res.exception is not None  # the error propagates instead of a one-liner


def test_help_carries_caution_and_units(runner):
    res = runner.invoke(main, ["--help"])
    assert "CAUTION" in res.output and "licensed engineers" in res.output
    res = runner.invoke(main, ["scan", "--help"])
    for flag in ("--layer", "--speed-field", "--speed-unit", "--superelevation-field",
                 "--dem", "--crs", "--assume-crs", "--vehicle", "--overwrite",
                 "--station-spacing-m"):
        assert flag in res.output
    assert "CAUTION" in res.output


def test_unparsable_speeds_counted_rows_kept(runner, tmp_path, curve_layer):
    frame = curve_layer.copy()
    frame["maxspeed"] = ["fast"]
    path = tmp_path / "r.gpkg"
    frame.to_file(path)
    out = tmp_path / "o.gpkg"
    res = runner.invoke(main, ["scan", str(path), "-o", str(out), "--speed-field", "maxspeed"])
    assert res.exit_code == 0
    assert "could not be parsed" in res.output
    curves = pyogrio.read_dataframe(out, layer="curves")
    assert len(curves) == 1 and curves["posted_kmh"].isna().all()


def test_demo_runs(runner, tmp_path, demo_roads):
    out = tmp_path / "demo.gpkg"
    res = runner.invoke(main, ["demo", "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "Harrow Vale" in res.output and "hazard curves" in res.output
    assert {"curves", "segments", "hazards", "run"} <= {n for n, _ in pyogrio.list_layers(out)}


def test_flag_at_band_from_the_command_line(runner, tmp_path, demo_roads):
    import json

    common = ["--speed-field", "maxspeed", "--join-field", "ref"]
    hazards = {}
    for basis in ("estimate", "band"):
        out = tmp_path / f"{basis}.gpkg"
        res = runner.invoke(main, ["scan", str(demo_roads), "-o", str(out), "--flag-at", basis,
                                   *common])
        assert res.exit_code == 0, res.output
        hazards[basis] = pyogrio.read_dataframe(out, layer="hazards", read_geometry=False)
        run = pyogrio.read_dataframe(out, layer="run", read_geometry=False)
        assessment = json.loads(run["assessment"].iloc[0])
        assert assessment["flag_at"] == basis
        assert ("(--flag-at band)" in res.output) == (basis == "band")
    # the band flags every curve the estimate flags, and more, some under the estimate
    est, band = hazards["estimate"], hazards["band"]
    assert set(est["curve_id"]) < set(band["curve_id"])
    assert (band["band_position"] == "under_estimate").any()
    assert not (est["band_position"] == "under_estimate").any()
    under = band[band["band_position"] == "under_estimate"]
    assert (under["posted_kmh"] <= under["limit_kmh"]).all()
    assert (under["posted_kmh"] > under["limit_low_kmh"]).all()
    res = runner.invoke(main, ["scan", str(demo_roads), "-o", str(tmp_path / "x.gpkg"),
                               "--flag-at", "worst"])
    assert res.exit_code == 2 and "--flag-at" in res.output


def test_osm_maxspeed_field_is_read_without_naming_it(runner, roads_file, tmp_path):
    out = tmp_path / "out.gpkg"
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "posted speed field 'maxspeed'" in res.output
    curves = pyogrio.read_dataframe(out, layer="curves")
    assert (curves["posted_kmh"] == 100.0).all()


def test_a_layer_without_a_speed_field_says_so(runner, tmp_path, curve_layer):
    path = tmp_path / "nospeed.gpkg"
    curve_layer.drop(columns="maxspeed").to_file(path)
    out = tmp_path / "out.gpkg"
    res = runner.invoke(main, ["scan", str(path), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "the layer has no field 'maxspeed'" in res.output
    assert "--speed-field" in res.output
    curves = pyogrio.read_dataframe(out, layer="curves")
    assert len(curves) == 1 and curves["posted_kmh"].isna().all()


def test_output_must_be_named_as_a_geopackage(runner, roads_file, tmp_path):
    # a GeoPackage written under out.shp (or with no extension) misleads whoever opens it
    for name in ("out.shp", "out"):
        res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / name)])
        assert res.exit_code == 1 and "ending in .gpkg" in res.output
        assert not (tmp_path / name).exists()
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "OUT.GPKG")])
    assert res.exit_code == 0, res.output


def test_folder_the_permission_bits_allow_but_refuses_a_file(runner, roads_file, tmp_path,
                                                             monkeypatch):
    # root, a read-only mount or an ACL: os.access says yes, creating a file fails
    import curvescan.io.vector as vector

    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(vector.tempfile, "mkstemp", refuse)
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg")])
    assert res.exit_code == 1 and "output folder is not writable" in res.output
    assert res.exception is None or isinstance(res.exception, SystemExit)


def test_bad_output_crs_is_one_line_before_the_scan(runner, roads_file, tmp_path):
    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg"),
                               "--output-crs", "EPSG:nonsense"])
    assert res.exit_code == 1, res.output
    assert "--output-crs 'EPSG:nonsense' is not a valid CRS" in res.output
    assert len(res.output.strip().splitlines()) == 1


def test_scheduler_that_cannot_be_reached_is_one_line(runner, roads_file, tmp_path):
    pytest.importorskip("distributed")
    import socket
    import threading

    res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg"),
                               "--scheduler", "nohost"])
    assert res.exit_code == 1, res.output
    assert "cannot connect to the dask scheduler 'nohost'" in res.output
    # a service that is no dask scheduler (a web server): its reply read as a message
    # length asked numpy for exabytes, which the command line called "out of memory"
    server = socket.create_server(("127.0.0.1", 0))

    def answer():
        try:
            conn, _ = server.accept()
        except OSError:
            return
        with conn:
            conn.sendall(b"HTTP/1.1 400 Bad Request\r\nContent-Length: 0\r\n\r\n" * 4)

    threading.Thread(target=answer, daemon=True).start()
    address = "tcp://127.0.0.1:%d" % server.getsockname()[1]
    try:
        res = runner.invoke(main, ["scan", str(roads_file), "-o", str(tmp_path / "o.gpkg"),
                                   "--scheduler", address])
    finally:
        server.close()
    assert res.exit_code == 1, res.output
    assert "cannot connect to the dask scheduler" in res.output
    assert "out of memory" not in res.output

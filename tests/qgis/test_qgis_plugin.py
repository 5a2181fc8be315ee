"""The QGIS plugin in real, headless QGIS: registration, runs, equality with the CLI,
cancellation, clear errors, styles, presets.

Skipped where QGIS is not importable (see conftest.py). The demo district (Harrow Vale) is
invented: it is used only to compare the plugin with the command line on the same input,
never as a check value.
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from curvescan.algorithms import SCAN
from curvescan.cautions import CAUTION
from curvescan.physics.presets import load_presets

pytestmark = pytest.mark.qgis

ROOT = Path(__file__).resolve().parents[2]
ROADS = ROOT / "data_demo" / "harrow_vale_roads.gpkg"
DEM = ROOT / "data_demo" / "harrow_vale_dem.tif"
DEMO_PARAMS = {"speed_field": "maxspeed", "join_field": "ref"}
KIND_TO_QGIS = {"float": "number", "int": "number", "bool": "boolean", "str": "string",
                "choice": "enum", "crs": "crs", "field": "field", "path": "file"}


@pytest.fixture(scope="module")
def demo_data():
    if not ROADS.exists() or not DEM.exists():
        pytest.skip("demo data missing")
    return ROADS, DEM


def _feedback(cancel_after: str | None = None):
    from qgis.core import QgsProcessingFeedback

    class Recorder(QgsProcessingFeedback):
        """Keeps every message; cancels once a given stage reports done."""

        def __init__(self):
            super().__init__()
            self.texts, self.infos, self.warnings = [], [], []

        def setProgressText(self, text):  # noqa: N802
            self.texts.append(text)
            if cancel_after is not None and text == f"{cancel_after} done":
                self.cancel()

        def pushInfo(self, text):  # noqa: N802
            self.infos.append(text)

        def pushWarning(self, text):  # noqa: N802
            self.warnings.append(text)

    return Recorder()


def _run(params, feedback=None):
    import processing

    return processing.run("curvescan:scan", params, feedback=feedback or _feedback())


def _cli(*args) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "curvescan.cli.main", "-q", *map(str, args)],
                          capture_output=True, text=True, timeout=300)


def _cli_flags(params: dict) -> list[str]:
    out = []
    for name, value in params.items():
        out += [SCAN.param(name).flag, str(value)]
    return out


def _read(path, layer):
    return pyogrio.read_dataframe(path, layer=layer)


def assert_same_layers(a, b, layers=("curves", "hazards", "segments")):
    """Same rows, same values, same geometry in every output layer."""
    for layer in layers:
        fa, fb = _read(a, layer), _read(b, layer)
        assert len(fa) == len(fb) > 0, layer
        assert list(fa.columns) == list(fb.columns), layer
        cols = [c for c in fa.columns if c != "geometry"]
        pd.testing.assert_frame_equal(fa[cols].reset_index(drop=True),
                                      fb[cols].reset_index(drop=True), check_exact=False,
                                      rtol=1e-12, atol=1e-9, obj=layer)
        assert shapely.equals_exact(fa.geometry.values, fb.geometry.values, 1e-9).all(), layer


def _memory_copy(path, name="roads_mem", crs="EPSG:4326", extra_date=False):
    """A memory layer with the features and fields of a file layer, in file order."""
    from qgis.core import QgsField, QgsVectorLayer
    from qgis.PyQt.QtCore import QDate, QVariant

    src = QgsVectorLayer(str(path), "src", "ogr")
    assert src.isValid()
    mem = QgsVectorLayer(f"LineString?crs={crs or 'none'}", name, "memory")
    fields = [src.fields().at(i) for i in range(src.fields().count())]
    if extra_date:
        fields.append(QgsField("opened", QVariant.Date))
    assert mem.dataProvider().addAttributes(fields)
    mem.updateFields()
    feats = []
    for f in src.getFeatures():
        attrs = f.attributes() + ([QDate(2001, 5, 4)] if extra_date else [])
        f.setFields(mem.fields(), initAttributes=False)
        f.setAttributes(attrs)
        feats.append(f)
    ok, _ = mem.dataProvider().addFeatures(feats)
    assert ok and mem.featureCount() == src.featureCount()
    return mem


# --- registration and generation ----------------------------------------------------------
def test_provider_registers_through_plugin_entry_point(provider):
    import qgis.utils

    assert "curvescan_qgis" in qgis.utils.active_plugins
    ids = {a.id() for a in provider.algorithms()}
    assert {"curvescan:scan", "curvescan:list_vehicles", "curvescan:list_conditions",
            "curvescan:edit_vehicle", "curvescan:edit_condition"} <= ids


def test_scan_form_is_generated_from_declaration(provider):
    from qgis.core import QgsApplication, QgsProcessingParameterDefinition

    alg = QgsApplication.processingRegistry().algorithmById("curvescan:scan")
    defs = {d.name(): d for d in alg.parameterDefinitions()}
    declared = [p for p in SCAN.parameters if p.name != "layer"]
    assert set(defs) == {p.name for p in declared} | {"input", "dem", "output"}
    for p in declared:
        d = defs[p.name]
        assert d.type() == KIND_TO_QGIS[p.kind], p.name
        assert d.description() == p.label()
        assert bool(d.flags() & QgsProcessingParameterDefinition.FlagAdvanced) == p.advanced
        if p.kind == "field":
            assert d.parentLayerParameterName() == "input"
        elif p.kind == "choice":
            assert d.options() == list(p.choices)
            assert d.options()[d.defaultValue()] == p.default
        elif p.kind in ("float", "int") and p.default is not None:
            assert d.defaultValue() == p.default
            if p.minimum is not None:
                assert d.minimum() == p.minimum
    assert defs["dem"].flags() & QgsProcessingParameterDefinition.FlagOptional
    assert CAUTION in alg.shortHelpString().replace("&#x27;", "'")


def test_new_declared_parameter_of_every_kind_appears(provider):
    """A declaration nobody wrote plugin code for still gets a full form."""
    import dataclasses

    from curvescan.declare import KINDS, Param
    from curvescan_qgis.declared import DeclaredAlgorithm

    extra = tuple(Param(f"new_{k}", k, None, f"A new {k}.",
                        choices=("a", "b") if k == "choice" else None) for k in KINDS)
    declaration = dataclasses.replace(SCAN, name="scan_plus",
                                      parameters=SCAN.parameters + extra)
    alg = DeclaredAlgorithm(declaration)
    alg.initAlgorithm()
    for p in extra:
        d = alg.parameterDefinition(p.name)
        assert d is not None and d.type() == KIND_TO_QGIS[p.kind], p.name


# --- runs and equality with the command line ----------------------------------------------
@pytest.fixture(scope="module")
def cli_demo(demo_data, tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "cli.gpkg"
    t0 = time.perf_counter()
    res = _cli("scan", ROADS, "-o", out, "--dem", DEM, *_cli_flags(DEMO_PARAMS))
    assert res.returncode == 0, res.stderr
    print(f"CLI demo scan: {time.perf_counter() - t0:.1f} s")
    return out


def test_scan_demo_equals_command_line(provider, cli_demo, tmp_path):
    out = tmp_path / "qgis.gpkg"
    fb = _feedback()
    t0 = time.perf_counter()
    result = _run({"input": str(ROADS), "dem": str(DEM), "output": str(out), **DEMO_PARAMS},
                  fb)
    print(f"QGIS demo scan: {time.perf_counter() - t0:.1f} s")
    assert result["output"] == str(out)
    assert_same_layers(out, cli_demo)
    run = _read(out, "run")
    assert run["dem"][0] == str(DEM)
    assert [t for t in fb.texts if t.endswith(" done")][-1] == "assess done"
    assert any(i.startswith("curves found:") for i in fb.infos)
    assert any("CAUTION" in i for i in fb.infos)
    # GeoPackage 1.3 for QGIS 3.22's GDAL (1.4 is only partly supported there)
    with sqlite3.connect(out) as con:
        assert con.execute("PRAGMA user_version").fetchone()[0] == 10300


def test_scan_memory_layer_equals_command_line(provider, demo_data, tmp_path):
    mem = _memory_copy(ROADS)
    out = tmp_path / "mem.gpkg"
    ref = tmp_path / "cli.gpkg"
    res = _cli("scan", ROADS, "-o", ref, *_cli_flags(DEMO_PARAMS))
    assert res.returncode == 0, res.stderr
    _run({"input": mem, "output": str(out), **DEMO_PARAMS})
    assert_same_layers(out, ref)


def test_scan_as_background_task(provider, demo_data, tmp_path):
    from qgis.core import (
        QgsApplication,
        QgsProcessingAlgRunnerTask,
        QgsProcessingContext,
    )
    from qgis.PyQt.QtCore import QCoreApplication

    alg = QgsApplication.processingRegistry().createAlgorithmById("curvescan:scan")
    context, fb = QgsProcessingContext(), _feedback()
    out = tmp_path / "task.gpkg"
    task = QgsProcessingAlgRunnerTask(alg, {"input": str(ROADS), "output": str(out),
                                            **DEMO_PARAMS}, context, fb)
    done = {}
    task.executed.connect(lambda ok, results: done.update(ok=ok, results=results))
    QgsApplication.taskManager().addTask(task)
    deadline = time.time() + 120
    while "ok" not in done and time.time() < deadline:
        QCoreApplication.processEvents()
        time.sleep(0.01)
    assert done.get("ok") is True, fb.infos
    assert done["results"]["output"] == str(out)
    assert len(_read(out, "curves")) > 0
    names = {d.name for d in context.layersToLoadOnCompletion().values()}
    assert {"curves", "segments", "hazards", "run"} <= names


# --- cancellation -----------------------------------------------------------------------
def test_cancel_stops_at_the_next_stage_and_writes_nothing(provider, demo_data, tmp_path):
    from qgis.core import QgsProcessingException

    out = tmp_path / "cancelled.gpkg"
    fb = _feedback(cancel_after="prepare")
    with pytest.raises(QgsProcessingException, match="cancelled"):
        _run({"input": str(ROADS), "output": str(out), **DEMO_PARAMS}, fb)
    assert "prepare done" in fb.texts
    assert "geometry done" not in fb.texts
    assert not out.exists()
    assert not list(tmp_path.glob("*.part.gpkg"))


def test_cancel_before_start(provider, demo_data, tmp_path):
    from qgis.core import QgsProcessingException

    fb = _feedback()
    fb.cancel()
    with pytest.raises(QgsProcessingException, match="cancelled"):
        _run({"input": str(ROADS), "output": str(tmp_path / "x.gpkg")}, fb)
    assert "read done" not in fb.texts


# --- clear errors -------------------------------------------------------------------------
def test_layer_without_crs_gives_the_command_line_words(provider, demo_data, tmp_path):
    from qgis.core import QgsProcessingException

    mem = _memory_copy(ROADS, name="no_crs_roads", crs=None)
    assert not mem.crs().isValid()
    with pytest.raises(QgsProcessingException) as info:
        _run({"input": mem, "output": str(tmp_path / "x.gpkg")})
    message = str(info.value)
    assert "\n" not in message.strip()
    assert message.startswith("layer 'no_crs_roads' has no CRS")
    # the same words from the command line on the same data without a CRS (a shapefile
    # without .prj), and from the plugin on that file
    frame = pyogrio.read_dataframe(ROADS).set_crs(None, allow_override=True)
    nocrs = tmp_path / "nocrs.shp"
    with pytest.warns(UserWarning, match="crs"):
        pyogrio.write_dataframe(frame, nocrs)
    res = _cli("scan", nocrs, "-o", tmp_path / "y.gpkg")
    assert res.returncode == 1
    cli_line = res.stderr.strip().splitlines()[-1]
    assert cli_line.endswith(message.split(" has no CRS", 1)[1])
    with pytest.raises(QgsProcessingException) as info:
        _run({"input": str(nocrs), "output": str(tmp_path / "x.gpkg")})
    assert cli_line == f"Error: {info.value}"
    # and the same remedy works in QGIS
    out = tmp_path / "assumed.gpkg"
    _run({"input": mem, "output": str(out), "assume_crs": "EPSG:4326"})
    assert len(_read(out, "curves")) > 0


def test_field_of_wrong_type_is_refused(provider, demo_data, tmp_path):
    from qgis.core import QgsProcessingException

    mem = _memory_copy(ROADS, extra_date=True)
    with pytest.raises(QgsProcessingException) as info:
        _run({"input": mem, "output": str(tmp_path / "x.gpkg"), "speed_field": "opened"})
    message = str(info.value)
    assert message.startswith("--speed-field: field 'opened' holds date values")
    assert not (tmp_path / "x.gpkg").exists()


def test_missing_field_gives_the_command_line_words(provider, demo_data, tmp_path):
    from qgis.core import QgsProcessingException

    with pytest.raises(QgsProcessingException) as info:
        _run({"input": str(ROADS), "output": str(tmp_path / "x.gpkg"),
              "speed_field": "posted"})
    res = _cli("scan", ROADS, "-o", tmp_path / "y.gpkg", "--speed-field", "posted")
    assert res.returncode == 1
    assert res.stderr.strip().splitlines()[-1] == f"Error: {info.value}"


# --- outputs loaded, with their styles ----------------------------------------------------
def test_outputs_load_into_project_with_stored_styles(provider, demo_data, tmp_path):
    import processing
    from qgis.core import QgsProject, QgsVectorLayer

    out = tmp_path / "loaded.gpkg"
    processing.runAndLoadResults("curvescan:scan", {"input": str(ROADS), "output": str(out),
                                                    **DEMO_PARAMS}, feedback=_feedback())
    project = QgsProject.instance()
    for name in ("curves", "segments", "hazards", "run"):
        layers = [lyr for lyr in project.mapLayersByName(name)
                  if lyr.source().startswith(str(out))]
        assert len(layers) == 1, name
    with sqlite3.connect(out) as con:
        has_styles = con.execute("SELECT count(*) FROM sqlite_master WHERE name = "
                                 "'layer_styles'").fetchone()[0] > 0
    if has_styles:  # the writer stored styles: the loaded layers carry them
        curves = project.mapLayersByName("curves")[-1]
        with sqlite3.connect(out) as con:
            qml = con.execute("SELECT styleQML FROM layer_styles WHERE f_table_name = "
                              "'curves' AND useAsDefault").fetchone()[0]
        assert f'type="{curves.renderer().type()}"' in qml
    project.removeAllMapLayers()
    # A style stored in the file (here by QGIS itself) is applied on loading.
    copy = tmp_path / "styled.gpkg"
    copy.write_bytes(out.read_bytes())
    if has_styles:
        with sqlite3.connect(copy) as con:
            con.execute("DELETE FROM layer_styles")
    layer = QgsVectorLayer(f"{copy}|layername=curves", "curves", "ogr")
    _categorise(layer, "direction")
    assert layer.saveStyleToDatabase("curvescan", "test", True, "") in ("", None)
    from curvescan_qgis.declared import load_stored_style
    fresh = QgsVectorLayer(f"{copy}|layername=curves", "curves", "ogr",
                           QgsVectorLayer.LayerOptions(False))
    assert fresh.renderer().type() == "singleSymbol"
    assert load_stored_style(fresh)
    assert fresh.renderer().type() == "categorizedSymbol"
    assert fresh.renderer().classAttribute() == "direction"
    plain = QgsVectorLayer(f"{copy}|layername=segments", "segments", "ogr",
                           QgsVectorLayer.LayerOptions(False))
    assert not load_stored_style(plain)


def _categorise(layer, field):
    from qgis.core import QgsCategorizedSymbolRenderer, QgsRendererCategory, QgsSymbol

    cats = [QgsRendererCategory(v, QgsSymbol.defaultSymbol(layer.geometryType()), v)
            for v in ("left", "right")]
    layer.setRenderer(QgsCategorizedSymbolRenderer(field, cats))


# --- presets ------------------------------------------------------------------------------
def test_list_presets_tables(provider, tmp_path):
    import processing

    builtin = load_presets()
    for kind in ("vehicles", "conditions"):
        out = tmp_path / f"{kind}.gpkg"
        processing.run(f"curvescan:list_{kind}", {"output": str(out)}, feedback=_feedback())
        table = _read(out, kind)
        assert sorted(table["name"]) == sorted(getattr(builtin, kind))
        assert table["source"].str.len().min() > 0


def test_edit_vehicle_then_scan_with_it(provider, demo_data, tmp_path):
    import processing
    from qgis.core import QgsProcessingException

    presets = tmp_path / "fleet.toml"
    with pytest.raises(QgsProcessingException, match="missing source"):
        processing.run("curvescan:edit_vehicle", {"presets_file": str(presets),
                                                  "name": "gritter",
                                                  "rollover_threshold_g": 0.42},
                       feedback=_feedback())
    assert not presets.exists()
    processing.run("curvescan:edit_vehicle", {
        "presets_file": str(presets), "name": "gritter", "rollover_threshold_g": 0.42,
        "source": "district tilt-table test"}, feedback=_feedback())
    processing.run("curvescan:edit_condition", {
        "presets_file": str(presets), "name": "slush", "friction": 0.3,
        "source": "district skid survey"}, feedback=_feedback())
    loaded = load_presets(presets)
    assert loaded.vehicles["gritter"].rollover_threshold_g == 0.42
    assert loaded.conditions["slush"].friction == 0.3
    out = tmp_path / "fleet.gpkg"
    _run({"input": str(ROADS), "output": str(out), "presets_file": str(presets),
          "vehicle": "gritter", "conditions": "slush", **DEMO_PARAMS})
    curves = _read(out, "curves")
    ref = tmp_path / "cli_fleet.gpkg"
    res = _cli("scan", ROADS, "-o", ref, "--presets-file", presets, "--vehicle", "gritter",
               "--conditions", "slush", *_cli_flags(DEMO_PARAMS))
    assert res.returncode == 0, res.stderr
    assert np.allclose(curves["v_rollover_kmh"], _read(ref, "curves")["v_rollover_kmh"],
                       equal_nan=True)
    processing.run("curvescan:edit_vehicle", {"presets_file": str(presets),
                                              "name": "gritter", "remove": True},
                   feedback=_feedback())
    assert "gritter" not in load_presets(presets).vehicles


def test_without_curvescan_the_plugin_says_how_to_install(qgis_app, plugin_dir, tmp_path):
    """QGIS starting the plugin where curvescan is not importable: a message, no crash."""
    script = tmp_path / "start.py"
    script.write_text(f"""
import os, sys
os.environ["QT_QPA_PLATFORM"] = "offscreen"
for key in ("QGIS_CUSTOM_CONFIG_PATH", "XDG_CONFIG_HOME"):
    os.environ[key] = {str(tmp_path)!r}
sys.modules["curvescan"] = None  # as if not installed
sys.path.append("/usr/share/qgis/python/plugins")
from qgis.core import QgsApplication, QgsMessageLog
QgsApplication.setPrefixPath("/usr", True)
app = QgsApplication([], False)
app.initQgis()
messages = []
QgsApplication.messageLog().messageReceived.connect(
    lambda text, tag, level: messages.append((tag, text)))
import qgis.utils
sys.path.insert(0, {str(plugin_dir)!r})
qgis.utils.plugin_paths.insert(0, {str(plugin_dir)!r})
qgis.utils.updateAvailablePlugins()
assert qgis.utils.loadPlugin("curvescan_qgis")
assert qgis.utils.startProcessingPlugin("curvescan_qgis")
print("PROVIDER", QgsApplication.processingRegistry().providerById("curvescan"))
print("MESSAGES", messages)
sys.stdout.flush()
os._exit(0)
""")
    res = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    assert "PROVIDER None" in res.stdout
    assert "curvescan is not installed in the Python QGIS uses" in res.stdout
    assert "pip install curvescan" in res.stdout


def test_dialog_builds_and_renders(qgis_app, demo_data, tmp_path):
    """The scan dialog (a widget for every generated parameter) opens and renders, as in the
    documentation screenshot."""
    target = tmp_path / "dialog.png"
    env = {**os.environ, "QT_QPA_PLATFORM": "offscreen", "QGIS_CUSTOM_CONFIG_PATH": str(tmp_path),
           "XDG_CONFIG_HOME": str(tmp_path)}
    res = subprocess.run([sys.executable, str(ROOT / "qgis_plugin" / "screenshot.py"),
                          str(target)], capture_output=True, text=True, timeout=180, env=env)
    assert res.returncode == 0, res.stderr[-2000:]
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    from qgis.PyQt.QtGui import QImage

    image = QImage(str(target))
    assert (image.width(), image.height()) == (1100, 1500)


def test_file_without_crs_is_read_in_the_crs_set_in_qgis(provider, demo_data, tmp_path):
    """A shapefile without .prj whose CRS the user set in QGIS scans as on the command line
    with --assume-crs; a CRS stored in the file would win (curvescan never overrides it)."""
    from qgis.core import QgsCoordinateReferenceSystem, QgsVectorLayer

    frame = pyogrio.read_dataframe(ROADS).set_crs(None, allow_override=True)
    nocrs = tmp_path / "noprj.shp"
    with pytest.warns(UserWarning, match="crs"):
        pyogrio.write_dataframe(frame, nocrs)
    layer = QgsVectorLayer(str(nocrs), "noprj", "ogr")
    assert not layer.crs().isValid()
    layer.setCrs(QgsCoordinateReferenceSystem("EPSG:4326"))
    out, ref = tmp_path / "qgis.gpkg", tmp_path / "cli.gpkg"
    _run({"input": layer, "output": str(out), **DEMO_PARAMS})
    res = _cli("scan", nocrs, "-o", ref, "--assume-crs", "EPSG:4326", *_cli_flags(DEMO_PARAMS))
    assert res.returncode == 0, res.stderr
    assert_same_layers(out, ref)

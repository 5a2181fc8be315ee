"""Headless QGIS for the plugin tests: started once per session, skipped where absent.

QGIS is found when ``qgis.core`` imports (Debian's python3-qgis seen through a virtual
environment made with ``--system-site-packages``). Set ``CURVESCAN_REQUIRE_QGIS=1`` (CI does)
to turn the skip into a failure, so a broken QGIS set-up cannot pass as "skipped".
"""

from __future__ import annotations

import os
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
PLUGIN_NAME = "curvescan_qgis"
_STATE: dict = {}


def _import_qgis():
    try:
        import qgis.core  # noqa: F401
    except ImportError as exc:
        if os.environ.get("CURVESCAN_REQUIRE_QGIS") == "1":
            pytest.fail(f"QGIS required (CURVESCAN_REQUIRE_QGIS=1) but not importable: {exc}")
        pytest.skip(f"QGIS not importable ({exc})")


@pytest.fixture(scope="session")
def qgis_app(tmp_path_factory):
    """A headless QgsApplication with Processing initialised (never exited: see below)."""
    _import_qgis()
    if "app" in _STATE:
        return _STATE["app"]
    home = tmp_path_factory.mktemp("qgis_home")
    for key in ("QGIS_CUSTOM_CONFIG_PATH", "XDG_CONFIG_HOME", "TMPDIR"):
        os.environ[key] = str(home)
    os.environ["QT_QPA_PLATFORM"] = "offscreen"
    os.environ["GDAL_PAM_ENABLED"] = "NO"  # no .aux.xml beside the demo DEM
    plugins = "/usr/share/qgis/python/plugins"
    if plugins not in sys.path:
        sys.path.append(plugins)
    from qgis.core import QgsApplication

    QgsApplication.setPrefixPath("/usr", True)
    app = QgsApplication([], False)
    app.initQgis()
    from processing.core.Processing import Processing

    Processing.initialize()
    # exitQgis() is not called: it can crash at interpreter exit while layers live on.
    _STATE["app"] = app
    return app


@pytest.fixture(scope="session")
def plugin_zip(tmp_path_factory):
    """The installable zip, built by ``qgis_plugin/build_zip.py`` (needs no QGIS)."""
    sys.path.insert(0, str(ROOT / "qgis_plugin"))
    try:
        import build_zip
    finally:
        sys.path.pop(0)
    return build_zip.build(tmp_path_factory.mktemp("dist"))


@pytest.fixture(scope="session")
def plugin_dir(tmp_path_factory, plugin_zip):
    """The plugin as a user gets it: the built zip, extracted into a plugins folder."""
    dest = tmp_path_factory.mktemp("plugins")
    with zipfile.ZipFile(plugin_zip) as zf:
        zf.extractall(dest)
    return dest


@pytest.fixture(scope="session")
def provider(qgis_app, plugin_dir):
    """Start the plugin through its own entry point, as QGIS does for Processing plugins."""
    import qgis.utils
    from qgis.core import QgsApplication

    if str(plugin_dir) not in sys.path:
        sys.path.insert(0, str(plugin_dir))
    qgis.utils.plugin_paths.insert(0, str(plugin_dir))
    qgis.utils.updateAvailablePlugins()
    assert qgis.utils.loadPlugin(PLUGIN_NAME)
    if PLUGIN_NAME not in qgis.utils.active_plugins:
        assert qgis.utils.startProcessingPlugin(PLUGIN_NAME)
    found = QgsApplication.processingRegistry().providerById("curvescan")
    assert found is not None, "the plugin did not register its provider"
    return found

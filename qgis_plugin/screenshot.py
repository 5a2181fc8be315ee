"""Take the documentation screenshot of the scan dialog, headless.

Run with the Python QGIS uses (see docs/qgis.md), from the repository root::

    QT_QPA_PLATFORM=offscreen python qgis_plugin/screenshot.py docs/img/qgis_scan_dialog.png

It starts QGIS without a window, loads the plugin from this folder and the demo district's
roads and elevation model into a project, opens the scan algorithm's dialog with the demo's
posted-speed and join fields chosen, and saves an image of it.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def _start_qgis():
    home = tempfile.mkdtemp(prefix="curvescan_qgis_")
    for key in ("QGIS_CUSTOM_CONFIG_PATH", "XDG_CONFIG_HOME"):
        os.environ.setdefault(key, home)
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    os.environ["GDAL_PAM_ENABLED"] = "NO"
    sys.path.append("/usr/share/qgis/python/plugins")
    from qgis.core import QgsApplication

    QgsApplication.setPrefixPath("/usr", True)
    app = QgsApplication([], True)
    app.initQgis()
    from processing.core.Processing import Processing

    Processing.initialize()
    import qgis.utils

    sys.path.insert(0, str(HERE))
    qgis.utils.plugin_paths.insert(0, str(HERE))
    qgis.utils.updateAvailablePlugins()
    if not (qgis.utils.loadPlugin("curvescan_qgis")
            and qgis.utils.startProcessingPlugin("curvescan_qgis")):
        raise SystemExit("the curvescan plugin did not start")
    return app


def main(target: str) -> None:
    """Save the dialog image to ``target``."""
    app = _start_qgis()
    from processing.gui.AlgorithmDialog import AlgorithmDialog
    from qgis.core import QgsApplication, QgsProject, QgsRasterLayer, QgsVectorLayer

    roads = QgsVectorLayer(str(ROOT / "data_demo" / "harrow_vale_roads.gpkg"), "harrow_vale_roads",
                           "ogr")
    dem = QgsRasterLayer(str(ROOT / "data_demo" / "harrow_vale_dem.tif"), "harrow_vale_dem")
    QgsProject.instance().addMapLayers([roads, dem])
    alg = QgsApplication.processingRegistry().createAlgorithmById("curvescan:scan")
    dialog = AlgorithmDialog(alg)
    dialog.setParameters({"input": roads, "dem": dem, "speed_field": "maxspeed",
                          "join_field": "ref", "output": "harrow_vale_curves.gpkg"})
    dialog.resize(1100, 1500)
    dialog.show()
    for _ in range(20):
        app.processEvents()
    Path(target).parent.mkdir(parents=True, exist_ok=True)
    if not dialog.grab().save(target):
        raise SystemExit(f"could not write {target}")
    print(target, flush=True)
    # Leave without Python's teardown: tearing QGIS down with a dialog and layers still
    # alive can crash at exit, which would turn a good run into a failed one.
    os._exit(0)


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else str(ROOT / "docs" / "img" / "qgis_scan_dialog.png"))

"""QGIS plugin: curvescan's declared algorithms in the Processing toolbox.

The plugin holds no analysis. It needs the ``curvescan`` package importable from the
Python QGIS runs (``pip install curvescan``; see docs/qgis.md) and builds its Processing
algorithms from ``curvescan.algorithms.ALGORITHMS``, the same declarations the command
line is generated from.
"""


def classFactory(iface):  # noqa: N802 - name fixed by QGIS
    """QGIS entry point: return the plugin object."""
    from .plugin import CurvescanPlugin

    return CurvescanPlugin(iface)

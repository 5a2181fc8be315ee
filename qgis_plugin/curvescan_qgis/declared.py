"""A Processing algorithm built from one :class:`curvescan.declare.Algorithm` declaration.

The form comes from the declaration's inputs, parameters and outputs (see
:mod:`curvescan_qgis.params`); running it calls the declared ``run`` function, the same
one the command line calls. Progress and cancellation travel through curvescan's
``progress(stage, fraction)`` callback; errors become a one-line
:class:`~qgis.core.QgsProcessingException` with the command line's words.
"""

from __future__ import annotations

import warnings
from typing import Any

from qgis.core import (
    QgsProcessingAlgorithm,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingLayerPostProcessorInterface,
    QgsProcessingUtils,
)

from curvescan.cautions import CAUTION
from curvescan.declare import Algorithm
from curvescan.errors import CurvescanError, CurvescanWarning

from .params import (
    SUPPLIED_BY_INPUT,
    check_field_types,
    from_input,
    help_html,
    parameter_for,
    parameter_for_port,
    value_of,
)

#: Formats curvescan reads directly; any other source (memory layer, database, a layer with
#: a selection or a filter) is first exported by QGIS to a temporary GeoPackage.
_READABLE_FORMATS = ["gpkg", "shp", "geojson", "json", "fgb", "gpx", "parquet"]


class ScanCancelled(Exception):
    """Raised from the progress callback when the user cancels; ends the pipeline there."""


def progress_callback(feedback: Any):
    """Return curvescan's ``progress(stage, fraction)`` callback driving a feedback object.

    Raises :class:`ScanCancelled` at the first stage boundary after the user cancels;
    the exception leaves the pipeline before the next stage and before anything is written.
    """
    def progress(stage: str, fraction: float) -> None:
        if feedback.isCanceled():
            raise ScanCancelled(stage)
        feedback.setProgressText(f"{stage} done")
        feedback.setProgress(100.0 * float(fraction))
    return progress


class StyleFromGeoPackage(QgsProcessingLayerPostProcessorInterface):
    """Apply the default style a GeoPackage stores for a layer (its ``layer_styles`` table)."""

    def postProcessLayer(self, layer, context, feedback) -> None:  # noqa: N802 - QGIS API
        """Load the stored default style, if the file has one."""
        load_stored_style(layer)


def load_stored_style(layer: Any) -> bool:
    """Apply the layer's default style from its GeoPackage; False when none is stored."""
    if not hasattr(layer, "listStylesInDatabase"):
        return False
    count, ids, _names, _descriptions, _error = layer.listStylesInDatabase()
    if count <= 0:  # the first ``count`` ids are this layer's own styles, default first
        return False
    _message, ok = layer.loadDefaultStyle()
    if not ok:
        from qgis.PyQt.QtXml import QDomDocument

        qml, _error = layer.getStyleFromDatabase(ids[0])
        document = QDomDocument()
        ok = bool(qml) and document.setContent(qml)[0] and layer.importNamedStyle(document)[0]
    if ok:
        layer.triggerRepaint()
    return bool(ok)


_LOADERS: list[StyleFromGeoPackage] = []


def _style_loader() -> StyleFromGeoPackage:
    """Return a new style post-processor, kept referenced from Python.

    The Processing context takes ownership and deletes it; the Python side must still stay
    alive until then, or QGIS calls a processor whose Python half is gone.
    """
    from qgis.PyQt import sip

    _LOADERS[:] = [p for p in _LOADERS if not sip.isdeleted(p)]
    loader = StyleFromGeoPackage()
    _LOADERS.append(loader)
    return loader


class DeclaredAlgorithm(QgsProcessingAlgorithm):
    """Processing algorithm generated from a curvescan algorithm declaration."""

    def __init__(self, declaration: Algorithm) -> None:
        super().__init__()
        self.declaration = declaration

    # -- identity and help ---------------------------------------------------------------
    def createInstance(self) -> "DeclaredAlgorithm":  # noqa: N802 - QGIS API
        """Return a fresh copy (Processing runs a copy per execution)."""
        return DeclaredAlgorithm(self.declaration)

    def name(self) -> str:
        """Return the declared name (algorithm id ``curvescan:<name>``)."""
        return self.declaration.name

    def displayName(self) -> str:  # noqa: N802 - QGIS API
        """Return the declared title."""
        return self.declaration.title

    def group(self) -> str:
        """Return the toolbox group."""
        return "Road curves"

    def groupId(self) -> str:  # noqa: N802 - QGIS API
        """Return the toolbox group id."""
        return "curves"

    def shortHelpString(self) -> str:  # noqa: N802 - QGIS API
        """Return the declared help, the cautions, and every parameter with its flag."""
        d = self.declaration
        return help_html(d.title, d.help, CAUTION, d.parameters)

    # -- form ----------------------------------------------------------------------------
    def _vector_inputs(self) -> list[str]:
        return [p.name for p in self.declaration.inputs if p.kind == "vector"]

    def initAlgorithm(self, config: Any = None) -> None:  # noqa: N802 - QGIS API
        """Add inputs, declared parameters and outputs, in declaration order."""
        vectors = self._vector_inputs()
        for port in self.declaration.inputs:
            self.addParameter(parameter_for_port(port, output=False))
        for param in self.declaration.parameters:
            if param.name not in SUPPLIED_BY_INPUT:
                self.addParameter(parameter_for(param, vectors[0] if vectors else None))
        for port in self.declaration.outputs:
            self.addParameter(parameter_for_port(port, output=True))

    # -- run -----------------------------------------------------------------------------
    def _input_source(self, name: str, parameters: dict, context: Any,
                      feedback: Any) -> tuple[str, str, Any]:
        """Return (path curvescan reads, layer name in it, QGIS source) of a vector input."""
        source = self.parameterAsSource(parameters, name, context)
        if source is None:
            raise QgsProcessingException(f"{name}: no layer given")
        path, layer_name = self.parameterAsCompatibleSourceLayerPathAndLayerName(
            parameters, name, context, _READABLE_FORMATS, "gpkg", feedback)
        return path, layer_name, source

    def _raster_path(self, name: str, parameters: dict, context: Any) -> str | None:
        if parameters.get(name) is None:
            return None
        layer = self.parameterAsRasterLayer(parameters, name, context)
        if layer is None:
            return None
        if layer.providerType() != "gdal":
            raise QgsProcessingException(
                f"--{name}: layer {layer.name()!r} is not a file raster GDAL can read")
        return layer.source()

    def processAlgorithm(self, parameters: dict, context: Any,  # noqa: N802 - QGIS API
                         feedback: Any) -> dict:
        """Run the declared function on the chosen layers; queue the outputs for loading."""
        d = self.declaration
        positional: list[Any] = []
        keywords: dict[str, Any] = {}
        renames: dict[str, str] = {}
        values = {p.name: value_of(self, p, parameters, context) for p in d.parameters
                  if p.name not in SUPPLIED_BY_INPUT}
        for port in d.inputs:
            if port.kind == "vector":
                path, layer_name, source = self._input_source(port.name, parameters, context,
                                                              feedback)
                check_field_types(values, d.parameters, source.fields())
                if path.startswith(QgsProcessingUtils.tempFolder()):  # exported copy
                    renames[path] = source.sourceName() or port.name
                values.update(from_input(d.parameters, values, layer_name, source.sourceCrs()))
                positional.append(path)
            elif port.kind == "raster":
                keywords[port.name] = self._raster_path(port.name, parameters, context)
            else:
                keywords[port.name] = self.parameterAsFile(parameters, port.name, context)
        outputs = {port.name: self.parameterAsFileOutput(parameters, port.name, context)
                   for port in d.outputs}
        positional.extend(outputs.values())
        given = {k: v for k, v in values.items() if v is not None}
        feedback.pushInfo(f"curvescan {d.name}: " + ", ".join(f"{k}={v!r}"
                                                              for k, v in given.items()))
        result = self._run(positional, keywords, given, feedback, renames)
        for name, path in outputs.items():
            self._load_on_completion(path, result, name, context)
        self._report(result, feedback)
        return dict(outputs)

    def _run(self, positional: list, keywords: dict, given: dict, feedback: Any,
             renames: dict[str, str]) -> Any:
        """Call the declared run function; map errors, warnings and cancellation."""
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", CurvescanWarning)
            try:
                if feedback.isCanceled():
                    raise ScanCancelled("start")
                result = self.declaration.run(*positional, overwrite=True,
                                              progress=progress_callback(feedback),
                                              **keywords, **given)
            except ScanCancelled as exc:
                raise QgsProcessingException(
                    f"{self.declaration.name} cancelled (after {exc}); nothing written") from None
            except CurvescanError as exc:
                raise QgsProcessingException(_one_line(str(exc), renames)) from None
            except MemoryError:
                raise QgsProcessingException("out of memory; scan the data in parts") from None
            finally:
                seen: set[str] = set()
                for w in caught:
                    text = _one_line(str(w.message), renames)
                    if issubclass(w.category, CurvescanWarning) and text not in seen:
                        seen.add(text)
                        feedback.pushWarning(f"warning: {text}")
        return result

    def _load_on_completion(self, path: str, result: Any, output_name: str,
                            context: Any) -> None:
        """Queue every layer the run wrote for loading, each with its stored style."""
        layers = getattr(result, "layers", None)
        names = list(layers()) if callable(layers) else []
        for layer_name in names:
            details = QgsProcessingContext.LayerDetails(layer_name, context.project(),
                                                        output_name)
            if layer_name != "run":
                details.layerTypeHint = QgsProcessingUtils.LayerHint.Vector
            details.setPostProcessor(_style_loader())
            context.addLayerToLoadOnCompletion(f"{path}|layername={layer_name}", details)

    def _report(self, result: Any, feedback: Any) -> None:
        """Push the command line's summary lines, then the caution."""
        try:
            from curvescan.report import summary_lines

            for line in summary_lines(result):
                feedback.pushInfo(line)
        except (ImportError, KeyError, AttributeError):  # summary is a courtesy only
            pass
        feedback.pushInfo("CAUTION: " + CAUTION)


def _one_line(text: str, renames: dict[str, str]) -> str:
    """First line of a message, temporary file names replaced by the layer's name."""
    line = text.strip().splitlines()[0] if text.strip() else text
    for path, name in renames.items():
        if path and path != name:
            line = line.replace(path, f"layer {name!r}")
    return line

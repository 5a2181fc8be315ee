"""Processing parameters generated from curvescan's declarations, and their values back.

One function per direction and no per-parameter code: every :class:`curvescan.declare.Param`
kind (float, int, bool, str, choice, crs, field, path) and every
:class:`curvescan.declare.Port` kind (vector, raster, gpkg, file) maps to one Processing
parameter type here. A parameter another developer declares tomorrow appears in the dialog
without a change to this plugin.
"""

from __future__ import annotations

import html
from typing import Any

from qgis.core import (
    QgsProcessing,
    QgsProcessingException,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterCrs,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterField,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
)
from qgis.PyQt.QtCore import QVariant

from curvescan.declare import Param, Port

#: Declared parameters whose value the GIS input supplies instead of the form:
#: ``layer`` names the layer inside a multi-layer file, which the chosen map layer fixes.
SUPPLIED_BY_INPUT = frozenset({"layer"})

#: Declared parameters the GIS input fills when the form leaves them unset: a file without a
#: CRS is read in the CRS the layer has in QGIS (a stored CRS always wins, as in curvescan).
FILLED_FROM_INPUT = frozenset({"assume_crs"})

#: Field types a declared ``field`` parameter can read: numbers or text.
_READABLE_FIELD_TYPES = frozenset({
    QVariant.Int, QVariant.UInt, QVariant.LongLong, QVariant.ULongLong, QVariant.Double,
    QVariant.String,
})

_FILE_FILTERS = {"gpkg": "GeoPackage (*.gpkg *.GPKG)", "file": "All files (*.*)"}


def _flagged(definition: QgsProcessingParameterDefinition, param: Param | None = None,
             optional: bool = False) -> QgsProcessingParameterDefinition:
    flags = definition.flags()
    if optional:
        flags |= QgsProcessingParameterDefinition.FlagOptional
    if param is not None and param.advanced:
        flags |= QgsProcessingParameterDefinition.FlagAdvanced
    definition.setFlags(flags)
    if param is not None:
        definition.setHelp(f"{param.help} (command line: {param.flag})")
    return definition


def parameter_for(param: Param, vector_input: str | None) -> QgsProcessingParameterDefinition:
    """Return the Processing parameter for one declared parameter.

    Parameters
    ----------
    param : curvescan.declare.Param
        The declaration (name, kind, default, help, unit, bounds, choices).
    vector_input : str or None
        Name of the algorithm's vector input; ``field`` parameters list its fields.
    """
    label = param.label()
    optional = param.default is None
    if param.kind in ("float", "int"):
        number_type = (QgsProcessingParameterNumber.Double if param.kind == "float"
                       else QgsProcessingParameterNumber.Integer)
        definition = QgsProcessingParameterNumber(param.name, label, number_type,
                                                  param.default, optional)
        if param.minimum is not None:
            definition.setMinimum(param.minimum)
        if param.maximum is not None:
            definition.setMaximum(param.maximum)
    elif param.kind == "bool":
        definition = QgsProcessingParameterBoolean(param.name, label, bool(param.default),
                                                   optional)
    elif param.kind == "choice":
        choices = list(param.choices)
        default = choices.index(param.default) if param.default in choices else None
        definition = QgsProcessingParameterEnum(param.name, label, choices, False, default,
                                                optional)
    elif param.kind == "crs":
        definition = QgsProcessingParameterCrs(param.name, label, param.default, True)
    elif param.kind == "field":
        # Optional always: a default such as ``lanes`` is used only where the layer has it.
        definition = QgsProcessingParameterField(param.name, label, param.default,
                                                 vector_input or "",
                                                 QgsProcessingParameterField.Any, False, True)
        optional = True
    elif param.kind == "path":
        definition = QgsProcessingParameterFile(param.name, label,
                                                QgsProcessingParameterFile.File, "",
                                                param.default, optional)
    else:  # "str" and any kind added later: text, validated by curvescan itself
        definition = QgsProcessingParameterString(param.name, label, param.default, False,
                                                  optional)
    return _flagged(definition, param, optional)


def parameter_for_port(port: Port, output: bool) -> QgsProcessingParameterDefinition:
    """Return the Processing parameter for a declared input or output port."""
    if output:
        definition = QgsProcessingParameterFileDestination(
            port.name, port.help.rstrip("."), _FILE_FILTERS.get(port.kind, ""), None,
            port.optional)
    elif port.kind == "vector":
        definition = QgsProcessingParameterFeatureSource(
            port.name, port.help.rstrip("."), [QgsProcessing.TypeVectorLine], None,
            port.optional)
    elif port.kind == "raster":
        definition = QgsProcessingParameterRasterLayer(port.name, port.help.rstrip("."), None,
                                                       port.optional)
    else:
        definition = QgsProcessingParameterFile(port.name, port.help.rstrip("."),
                                                QgsProcessingParameterFile.File, "", None,
                                                port.optional)
    return _flagged(definition, optional=port.optional)


def value_of(algorithm: Any, param: Param, parameters: dict, context: Any) -> Any:
    """Return one declared parameter's value as curvescan takes it; None when not set."""
    raw = parameters.get(param.name)
    if raw is None:
        return None
    name = param.name
    if param.kind == "float":
        return algorithm.parameterAsDouble(parameters, name, context)
    if param.kind == "int":
        return algorithm.parameterAsInt(parameters, name, context)
    if param.kind == "bool":
        return algorithm.parameterAsBoolean(parameters, name, context)
    if param.kind == "choice":
        index = algorithm.parameterAsEnum(parameters, name, context)
        return param.choices[index] if 0 <= index < len(param.choices) else None
    if param.kind == "crs":
        crs = algorithm.parameterAsCrs(parameters, name, context)
        if not crs.isValid():
            return None
        return crs.authid() or crs.toWkt()
    if param.kind == "field":
        fields = algorithm.parameterAsFields(parameters, name, context)
        return fields[0] if fields and fields[0] else None
    if param.kind == "path":
        return algorithm.parameterAsFile(parameters, name, context) or None
    text = algorithm.parameterAsString(parameters, name, context)
    return text if text != "" else None


def from_input(params: tuple[Param, ...], values: dict[str, Any], layer_name: str,
               crs: Any) -> dict[str, Any]:
    """Return the values the chosen input layer supplies (layer name; its CRS if unset)."""
    names = {p.name for p in params}
    out: dict[str, Any] = {}
    if layer_name and "layer" in names & SUPPLIED_BY_INPUT:
        out["layer"] = layer_name
    if "assume_crs" in names & FILLED_FROM_INPUT and values.get("assume_crs") is None \
            and crs.isValid():
        out["assume_crs"] = crs.authid() or crs.toWkt()
    return out


def check_field_types(values: dict[str, Any], params: tuple[Param, ...], fields: Any) -> None:
    """Refuse a chosen field that holds neither numbers nor text (dates, blobs, lists).

    Raises
    ------
    QgsProcessingException
        One line naming the parameter (by its command-line flag) and the field's type.
    """
    for param in params:
        name = values.get(param.name)
        if param.kind != "field" or name is None:
            continue
        index = fields.lookupField(name)
        if index < 0:
            continue  # curvescan itself names a missing field, with the list of fields
        field = fields.at(index)
        if field.type() not in _READABLE_FIELD_TYPES:
            raise QgsProcessingException(
                f"{param.flag}: field {name!r} holds {field.typeName() or 'unknown'} values;"
                " curvescan reads numbers or text there")


def help_html(title: str, text: str, caution: str, params: tuple[Param, ...]) -> str:
    """Return help: what the algorithm does, the caution, every parameter with its flag."""
    rows = []
    for p in params:
        if p.name in SUPPLIED_BY_INPUT:
            continue
        default = "" if p.default is None else f" Default: {html.escape(str(p.default))}."
        rows.append(f"<li><b>{html.escape(p.label())}</b> (<code>{p.flag}</code>): "
                    f"{html.escape(p.help)}{default}</li>")
    return (f"<p>{html.escape(text)}</p>"
            f"<p><b>Caution.</b> {html.escape(caution)}</p>"
            f"<p>Parameters (the command-line flag in brackets; error messages use it):</p>"
            f"<ul>{''.join(rows)}</ul>")

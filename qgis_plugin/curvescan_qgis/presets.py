"""List and edit curvescan's vehicle and surface-condition presets from the toolbox.

Generated, like the scan: one list and one edit algorithm per kind of preset that
:class:`curvescan.physics.presets.Presets` holds (``vehicles``, ``conditions``), with one
form field per field of the preset's dataclass. Loading and validation are curvescan's
own (:func:`curvescan.physics.presets.load_presets`); the edit algorithm writes a TOML
presets file that ``curvescan scan --presets-file`` and the scan algorithm read.
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
import tempfile
import tomllib
from typing import Any

from qgis.core import (
    QgsFeature,
    QgsFeatureSink,
    QgsField,
    QgsFields,
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingException,
    QgsProcessingOutputString,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QVariant

from curvescan.errors import CurvescanError
from curvescan.physics.presets import Presets, load_presets

_FILE_HELP = "TOML presets file ([vehicles.NAME] / [conditions.NAME] tables)"
_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _kinds() -> list[tuple[str, type]]:
    """(kind, preset class) for every dict of presets the catalogue holds."""
    builtin = load_presets()
    out = []
    for f in dataclasses.fields(Presets):
        items = getattr(builtin, f.name)
        if isinstance(items, dict) and items:
            out.append((f.name, type(next(iter(items.values())))))
    return out


def _field_help(cls: type) -> dict[str, str]:
    """Per-field descriptions from the class's numpydoc ``name : type`` entries."""
    helps: dict[str, str] = {}
    current: list[str] = []
    for line in (cls.__doc__ or "").splitlines():
        head = re.match(r"^\s{4}([\w, ]+) : ", line)
        if head:
            current = [n.strip() for n in head.group(1).split(",")]
            continue
        if current and line.strip():
            for name in current:
                helps[name] = (helps.get(name, "") + " " + line.strip()).strip()
        elif current:
            current = []
    return helps


def _singular(kind: str) -> str:
    return kind[:-1] if kind.endswith("s") else kind


class _PresetAlgorithm(QgsProcessingAlgorithm):
    """Shared part of the preset algorithms: one kind of preset and its dataclass."""

    def __init__(self, kind: str, cls: type) -> None:
        super().__init__()
        self.kind, self.cls = kind, cls

    def createInstance(self) -> "_PresetAlgorithm":  # noqa: N802 - QGIS API
        """Return a fresh copy."""
        return type(self)(self.kind, self.cls)

    def group(self) -> str:
        """Return the toolbox group."""
        return "Presets"

    def groupId(self) -> str:  # noqa: N802 - QGIS API
        """Return the toolbox group id."""
        return "presets"


class ListPresets(_PresetAlgorithm):
    """A table of one kind of preset (built-in plus a user file), with sources."""

    def name(self) -> str:
        """Return ``list_vehicles`` / ``list_conditions``."""
        return f"list_{self.kind}"

    def displayName(self) -> str:  # noqa: N802 - QGIS API
        """Return the title."""
        return f"List {self.kind}"

    def shortHelpString(self) -> str:  # noqa: N802 - QGIS API
        """Describe the table."""
        return (f"A table of the {self.kind} presets curvescan knows (built-in, plus those of an "
                f"optional presets file), one row each, with every value and its source; the "
                f"same as <code>curvescan {self.kind}</code>.")

    def initAlgorithm(self, config: Any = None) -> None:  # noqa: N802 - QGIS API
        """Add an optional presets file and a table output."""
        self.addParameter(QgsProcessingParameterFile(
            "presets_file", _FILE_HELP, QgsProcessingParameterFile.File, "toml", None, True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "output", f"{self.kind.capitalize()}", QgsProcessing.TypeVector))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 - QGIS API
        """Write one row per preset."""
        path = self.parameterAsFile(parameters, "presets_file", context) or None
        try:
            presets = load_presets(path)
        except CurvescanError as exc:
            raise QgsProcessingException(str(exc).splitlines()[0]) from None
        records = [item.as_record() for item in getattr(presets, self.kind).values()]
        fields = QgsFields()
        columns = [f.name for f in dataclasses.fields(self.cls)]
        for name in columns:
            sample = records[0].get(name) if records else ""
            number = isinstance(sample, (int, float)) and not isinstance(sample, bool)
            fields.append(QgsField(name, QVariant.Double if number else QVariant.String))
        sink, dest = self.parameterAsSink(parameters, "output", context, fields,
                                          QgsWkbTypes.NoGeometry)
        for record in records:
            feature = QgsFeature(fields)
            feature.setAttributes([record.get(name) for name in columns])
            sink.addFeature(feature, QgsFeatureSink.FastInsert)
            feedback.pushInfo(f"{record['name']}: " + ", ".join(
                f"{k}={record[k]}" for k in columns[1:] if k not in ("source", "label")))
        feedback.pushInfo(f"presets: {presets.origin}")
        return {"output": dest}


class EditPreset(_PresetAlgorithm):
    """Add, change or remove one preset in a TOML presets file."""

    def name(self) -> str:
        """Return ``edit_vehicle`` / ``edit_condition``."""
        return f"edit_{_singular(self.kind)}"

    def displayName(self) -> str:  # noqa: N802 - QGIS API
        """Return the title."""
        return f"Add or edit a {_singular(self.kind)} preset"

    def shortHelpString(self) -> str:  # noqa: N802 - QGIS API
        """Describe how the file is changed."""
        one = _singular(self.kind)
        return (f"Writes the {one} NAME into a TOML presets file (created if missing; other "
                f"entries are kept, comments are not). Fields left empty keep the value the "
                f"file or the built-in {one} of that name has; a changed built-in becomes "
                f"status 'user'. The scan algorithm and <code>curvescan scan --presets-file"
                f"</code> read the file. curvescan checks every value before the file is "
                f"replaced. Give each value's source: presets without one are refused.")

    def _editable(self) -> list[dataclasses.Field]:
        return [f for f in dataclasses.fields(self.cls) if f.name != "name"]

    def initAlgorithm(self, config: Any = None) -> None:  # noqa: N802 - QGIS API
        """Add file, name, remove flag, then one optional parameter per preset field."""
        self.addParameter(QgsProcessingParameterFileDestination(
            "presets_file", _FILE_HELP, "TOML (*.toml)"))
        self.addParameter(QgsProcessingParameterString("name", f"{_singular(self.kind)} name"))
        self.addParameter(QgsProcessingParameterBoolean(
            "remove", f"Remove this {_singular(self.kind)} from the file", False))
        helps = _field_help(self.cls)
        for f in self._editable():
            label = f.name.replace("_", " ")
            if f.type in (float, "float"):
                definition = QgsProcessingParameterNumber(
                    f.name, label, QgsProcessingParameterNumber.Double, None, True)
            else:
                definition = QgsProcessingParameterString(f.name, label, None, False, True)
            definition.setHelp(helps.get(f.name, ""))
            definition.setFlags(definition.flags() | QgsProcessingParameterDefinition.FlagOptional)
            self.addParameter(definition)
        self.addOutput(QgsProcessingOutputString("entry", "Entry written"))

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802 - QGIS API
        """Merge the entry into the file, check it with curvescan, then replace the file."""
        path = self.parameterAsFileOutput(parameters, "presets_file", context)
        name = self.parameterAsString(parameters, "name", context).strip().lower()
        doc = _read_toml(path)
        section = doc.setdefault(self.kind, {})
        if self.parameterAsBoolean(parameters, "remove", context):
            if name not in section:
                raise QgsProcessingException(f"{path}: no [{self.kind}.{name}] to remove")
            del section[name]
            entry = {}
        else:
            entry = self._entry(name, section, parameters, context)
            section[name] = entry
        _write_checked(path, doc)
        feedback.pushInfo(f"{path}: [{self.kind}.{name}] "
                          + ("removed" if not entry else json.dumps(entry)))
        return {"presets_file": path, "entry": json.dumps(entry)}

    def _entry(self, name: str, section: dict, parameters: dict, context: Any) -> dict:
        base = dict(section.get(name, {}))
        given: dict[str, Any] = {}
        for f in self._editable():
            if parameters.get(f.name) in (None, ""):
                continue
            if f.type in (float, "float"):
                given[f.name] = self.parameterAsDouble(parameters, f.name, context)
            else:
                given[f.name] = self.parameterAsString(parameters, f.name, context)
        builtin = getattr(load_presets(), self.kind).get(name)
        if not base and builtin is not None:
            base = {k: v for k, v in builtin.as_record().items() if k != "name"}
            if any(base.get(k) != v for k, v in given.items()):
                base["status"] = "user"
                base["source"] = f"user edit of the built-in preset; built-in: {base['source']}"
        base.update(given)
        return base


def _read_toml(path: str) -> dict:
    if not os.path.exists(path):
        return {}
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise QgsProcessingException(f"{path}: cannot read presets file ({exc})") from None


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    return json.dumps(str(value), ensure_ascii=False)


def toml_text(doc: dict) -> str:
    """TOML for ``{kind: {name: {key: number or text}}}`` presets documents."""
    lines: list[str] = []
    for kind, entries in doc.items():
        for name, table in entries.items():
            key = name if _BARE_KEY.match(name) else json.dumps(name)
            lines.append(f"[{kind}.{key}]")
            lines.extend(f"{k} = {_toml_value(v)}" for k, v in table.items())
            lines.append("")
    return "\n".join(lines)


def _write_checked(path: str, doc: dict) -> None:
    """Write to a temporary file, load it with curvescan, then move it into place."""
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=".presets.", suffix=".toml", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(toml_text(doc))
        try:
            load_presets(tmp)
        except CurvescanError as exc:
            raise QgsProcessingException(
                str(exc).splitlines()[0].replace(tmp, path)) from None
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def preset_algorithms() -> list[QgsProcessingAlgorithm]:
    """Return a list and an edit algorithm for every kind of preset."""
    out: list[QgsProcessingAlgorithm] = []
    for kind, cls in _kinds():
        out.extend([ListPresets(kind, cls), EditPreset(kind, cls)])
    return out

"""Build the installable QGIS plugin zip: ``python qgis_plugin/build_zip.py`` -> ``dist/``.

The zip holds one folder, ``curvescan_qgis/``, as QGIS's "Install from ZIP" expects. Its
``metadata.txt`` version is set to the curvescan version the zip is built from. curvescan
itself is not inside: it is installed with pip into the Python QGIS uses (docs/qgis.md).
"""

from __future__ import annotations

import argparse
import re
import zipfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
PLUGIN = HERE / "curvescan_qgis"
ROOT = HERE.parent


def curvescan_version() -> str:
    """Return the version in ``curvescan/_version.py`` (read as text, not imported)."""
    text = (ROOT / "curvescan" / "_version.py").read_text(encoding="utf-8")
    match = re.search(r"__version__\s*=\s*[\"']([^\"']+)[\"']", text)
    if not match:
        raise SystemExit("cannot find __version__ in curvescan/_version.py")
    return match.group(1)


def build(dest: str | Path = ROOT / "dist") -> Path:
    """Write ``curvescan_qgis-<version>.zip`` into ``dest`` and return its path."""
    version = curvescan_version()
    dest = Path(dest)
    dest.mkdir(parents=True, exist_ok=True)
    target = dest / f"curvescan_qgis-{version}.zip"
    files = sorted(p for p in PLUGIN.rglob("*")
                   if p.is_file() and "__pycache__" not in p.parts and p.suffix != ".pyc")
    with zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as zf:
        for path in files:
            arcname = f"curvescan_qgis/{path.relative_to(PLUGIN).as_posix()}"
            data = path.read_bytes()
            if path.name == "metadata.txt":
                data = re.sub(rb"(?m)^version=.*$", f"version={version}".encode(), data)
            zf.writestr(arcname, data)
    return target


def main() -> None:
    """Command-line entry: build into ``--dest`` (default ``dist/``) and print the path."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dest", default=str(ROOT / "dist"), help="output folder")
    print(build(parser.parse_args().dest))


if __name__ == "__main__":
    main()

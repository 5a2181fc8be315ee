"""The documentation stays true to the code."""

from __future__ import annotations

from pathlib import Path

from curvescan.config import SCAN_PARAMETERS
from curvescan.declare import parameters_markdown
from curvescan.export import CONTRACT_FIELDS

DOCS = Path(__file__).resolve().parents[1] / "docs"


def test_parameters_doc_is_generated_from_declarations():
    text = (DOCS / "parameters.md").read_text()
    assert text == parameters_markdown(SCAN_PARAMETERS), (
        "docs/parameters.md is stale: run `python -m curvescan.paramdoc > docs/parameters.md`")


def test_output_doc_names_every_contract_field():
    text = (DOCS / "output.md").read_text()
    missing = [f for f in CONTRACT_FIELDS if f"`{f}`" not in text]
    assert not missing


def test_readme_quick_start_has_two_commands():
    readme = (DOCS.parent / "README.md").read_text()
    quick = readme.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    blocks = [b for b in quick.split("```") if b.startswith("bash")]
    assert len(blocks) == 2
    assert "curvescan demo" in blocks[0] and "pytest" in blocks[1]

"""Print docs/parameters.md from the declared parameters: ``python -m curvescan.paramdoc``."""

from .config import SCAN_PARAMETERS
from .declare import parameters_markdown

if __name__ == "__main__":  # pragma: no cover
    print(parameters_markdown(SCAN_PARAMETERS), end="")

"""The Processing provider: one algorithm per curvescan declaration plus the preset tools."""

from __future__ import annotations

from qgis.core import QgsProcessingProvider

from curvescan import __version__
from curvescan.algorithms import ALGORITHMS

from .declared import DeclaredAlgorithm
from .presets import preset_algorithms


class CurvescanProvider(QgsProcessingProvider):
    """Provider ``curvescan``: algorithms generated from ``curvescan.algorithms.ALGORITHMS``."""

    def id(self) -> str:
        """Return the provider id (algorithm ids are ``curvescan:<name>``)."""
        return "curvescan"

    def name(self) -> str:
        """Return the name shown in the toolbox."""
        return "curvescan"

    def longName(self) -> str:  # noqa: N802 - QGIS API
        """Return the name with the installed curvescan version."""
        return f"curvescan {__version__}"

    def versionInfo(self) -> str:  # noqa: N802 - QGIS API
        """Return the curvescan version the algorithms come from."""
        return __version__

    def loadAlgorithms(self) -> None:  # noqa: N802 - QGIS API
        """Add every declared algorithm, then the preset list/edit algorithms."""
        for declaration in ALGORITHMS.values():
            self.addAlgorithm(DeclaredAlgorithm(declaration))
        for algorithm in preset_algorithms():
            self.addAlgorithm(algorithm)

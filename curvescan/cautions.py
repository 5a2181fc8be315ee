"""The cautions every output of curvescan carries (DESIGN.md section 7)."""

CAUTION = (
    "Screening only. Curves flagged here are candidates for an engineering study, not "
    "findings. Radius, superelevation and friction are estimates with uncertainty; posted "
    "and advisory speeds are set under local codes by the responsible road authority and "
    "licensed engineers, who decide."
)

__all__ = ["CAUTION"]

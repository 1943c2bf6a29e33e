"""The residual correlations after an answer's factor solution, with a sentence on what they rest on."""
from __future__ import annotations

from typing import Any

from ..stats.efa import RESIDUAL_THRESHOLD, EFAResult, largest_residuals, residual_correlations
from .answer import CorrelationsSection
from .settings import AnalysisSettings

__all__ = ["residual_view"]

_CORRELATION_WORDS = {"pearson": "Pearson correlations", "polychoric": "polychoric correlations"}


def residual_view(settings: AnalysisSettings, corr: CorrelationsSection, res: EFAResult) -> dict[str, Any]:
    """``{items, matrix, rmsr, threshold, large, n_factors, factors, basis}`` of the solution ``res`` fitted to
    ``corr`` (the RMSR is the one the fit reports: the root mean square of these residuals)."""
    names = list(res.names)
    E = residual_correlations(corr.matrix, res.pattern, res.phi)
    s = settings
    rotation = s.rotation + (f" (gamma {s.gamma:g})" if s.rotation == "oblimin" and s.gamma != 0 else "")
    words = _CORRELATION_WORDS.get(s.correlation, f"{s.correlation} correlations")
    basis = (f"Residual correlations after the {res.n_factors}-factor {rotation} {s.extraction} solution, "
             f"{words}{' (smoothed to positive definite)' if corr.smoothed else ''}: the observed "
             "correlation minus the one the factors reproduce.")
    return {"items": names, "matrix": E, "rmsr": res.fit["rmsr"], "threshold": RESIDUAL_THRESHOLD,
            "large": largest_residuals(E, names, R=corr.matrix), "n_factors": res.n_factors,
            "factors": list(res.factors), "basis": basis}

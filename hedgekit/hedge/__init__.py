"""Overlay hedge: neutralise chosen exposures at minimum tracking cost, in whole contracts.

The package along its seams (docs/methods.md section 4):

- :mod:`~hedgekit.hedge.spec`: :class:`HedgeSpec`, what the overlay must achieve;
- :mod:`~hedgekit.hedge.covariance`: :func:`instrument_covariance` (sample, Ledoit-Wolf,
  factor form);
- :mod:`~hedgekit.hedge.program`: :class:`OverlayProblem`, the cvxpy program built once with
  Parameters (DPP) and re-solved (the only module importing cvxpy, when a program is built);
- :mod:`~hedgekit.hedge.design`: :func:`design_overlay`, the stage;
- :mod:`~hedgekit.hedge.ticket`: the whole-contract vector (an integer program);
- :mod:`~hedgekit.hedge.result`: :class:`HedgeResult`, every derived figure computed once.
"""

from __future__ import annotations

from .covariance import FactorForm, instrument_covariance
from .design import design_overlay
from .program import OverlayProblem, OverlaySolveError
from .result import HedgeResult
from .spec import HedgeSpec

__all__ = [
    "FactorForm",
    "HedgeResult",
    "HedgeSpec",
    "OverlayProblem",
    "OverlaySolveError",
    "design_overlay",
    "instrument_covariance",
]

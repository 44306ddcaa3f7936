"""hedgekit: exposures of a book to state-variable innovations, their prices of risk,
and the overlay hedge that neutralises the ones you choose.

Stages, in the order data flows (each importable on its own, taking and returning pandas
objects and frozen results):

- :mod:`hedgekit.inputs`    read and validate files (:func:`load_config`, :func:`load_dataset`)
- :mod:`hedgekit.states`    VAR innovations, Gram-Schmidt orthogonalisation
- :mod:`hedgekit.exposures` full-sample and rolling betas, HAC errors
- :mod:`hedgekit.premia`    Fama-MacBeth prices of risk, Shanken correction
- :mod:`hedgekit.hedge`     the overlay optimiser and its ticket
- :mod:`hedgekit.stress`    scenario P&L; :mod:`hedgekit.backtest` walk-forward check
- :mod:`hedgekit.present`   terminal, HTML/Markdown report; :mod:`hedgekit.store` run history

Output is decision support, not investment advice.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

from .config import Config, load_config, parse_config  # noqa: E402
from .errors import HedgekitError, InputError, UnreachableError  # noqa: E402
from .inputs import Dataset, load_dataset  # noqa: E402

_LAZY = {
    "estimate_states": "states", "orthogonalise": "states", "realtime_innovations": "states",
    "surprise_to_shocks": "states",
    "time_series_betas": "exposures", "rolling_betas": "exposures", "estimate_exposures": "exposures",
    "fama_macbeth": "premia", "book_premium": "premia",
    "HedgeSpec": "hedge", "design_overlay": "hedge", "instrument_covariance": "hedge",
    "OverlayProblem": "hedge",
    "run_stress": "stress", "walk_forward": "backtest",
    "publish_report": "present.report", "RunStore": "store",
    "run_all": "pipeline",
}

__all__ = ["Config", "Dataset", "HedgekitError", "InputError", "UnreachableError", "__version__",
           "load_config", "load_dataset", "parse_config", *_LAZY]


def __getattr__(name: str):
    if name in _LAZY:
        module = importlib.import_module(f".{_LAZY[name]}", __name__)
        return getattr(module, name)
    raise AttributeError(f"module 'hedgekit' has no attribute {name!r}")

"""The standing cautions, said once: every command, the report and the JSON print these.

Stage results add cautions of their own only when their computation gives cause (for
example a robust overlay that needs much more gross notional); presentation never merges
or rewrites them.
"""

from __future__ import annotations

CAUTIONS: tuple[str, ...] = (
    "Decision support, not investment advice. Sizing and execution of any hedge stay with the firm's "
    "licensed professionals, its model-risk governance and the rules that apply to it.",
    "Every number is a statistical estimate from one sample; relations between state variables and "
    "returns shift across regimes, and past exposures need not hold in the next quarter.",
    "Derivative overlays carry margin, basis, liquidity and counterparty risk that these numbers do "
    "not show.",
)

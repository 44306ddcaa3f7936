"""The run record: every stage's typed result for one run, and the JSON made from it.

:class:`RunResult` is the single source of every number hedgekit shows: the terminal,
the report, the plots, ``--json`` and the run store all format ``RunResult.to_dict()``
(docs/interface.md lists its keys) and never compute a figure of their own.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any

from . import __version__
from .cautions import CAUTIONS
from .config import Config
from .inference import DEFAULT_CONFIDENCE, level_label

# Words for one period and many, by data frequency (one vocabulary per frequency).
PERIOD_WORDS = {"monthly": ("month", "months"), "quarterly": ("quarter", "quarters"),
                "daily": ("day", "days")}


def confidence_level(config: Config) -> float:
    """The one confidence level of every interval (``[intervals] confidence``)."""
    section = config.sections.get("intervals") or {}
    return float(section.get("confidence", DEFAULT_CONFIDENCE))


def config_file(config: Config) -> str:
    return str(config.path) if config.path else "configuration"


def period_words(frequency: str) -> tuple[str, str]:
    return PERIOD_WORDS.get(frequency, ("period", "periods"))


@dataclass(frozen=True)
class RunResult:
    """Every stage's result for one run (``None`` for a stage not run), with the run's metadata."""

    config: Config
    data: Any                      # inputs.Dataset
    factor_set: Any                # pipeline.FactorSet
    exposures: Any
    premia: Any
    hedge: Any
    stress: Any
    backtest: Any = None
    meta: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()

    @classmethod
    def build(cls, config: Config, data: Any, factor_set: Any, exposures: Any, premia: Any, hedge: Any,
              stress: Any, backtest: Any = None) -> RunResult:
        warnings = list(data.warnings)
        for part in (factor_set.states, exposures, premia, hedge, stress, backtest):
            warnings += list(getattr(part, "warnings", ()) or ())
        return cls(config, data, factor_set, exposures, premia, hedge, stress, backtest,
                   run_meta(config, data, factor_set), tuple(dict.fromkeys(warnings)))

    def stage_dicts(self) -> dict[str, dict | None]:
        st = self.factor_set.states
        exposures = self.exposures.to_dict() if self.exposures is not None else None
        return {
            "states": st.to_dict() if st is not None else None,
            "exposures": exposures,
            "premia": self.premia.to_dict() if self.premia is not None else None,
            "hedge": self.hedge.to_dict() if self.hedge is not None else None,
            "stress": self.stress.to_dict() if self.stress is not None else None,
            "backtest": self.backtest.to_dict() if self.backtest is not None else None,
        }

    def to_dict(self) -> dict[str, Any]:
        stages = self.stage_dicts()
        used = samples(stages)
        return {
            "meta": self.meta,
            **stages,
            "samples": used,
            "dropped": dropped(self.data, used),
            "warnings": list(self.warnings),
            "cautions": list(CAUTIONS),
        }


def samples(stages: dict[str, dict | None]) -> dict[str, dict]:
    """``{stage: {first, last, periods}}`` from each stage's own ``sample`` (the data it used)."""
    out: dict[str, dict] = {}
    for name, part in stages.items():
        sample = (part or {}).get("sample")
        if isinstance(sample, dict) and "first" in sample:
            out[name] = {k: sample.get(k) for k in ("first", "last", "periods")}
    return out


def dropped(data: Any, used: dict[str, dict]) -> list[dict]:
    """Every stretch of an input no stage used: gaps inside a series, rows outside all stage samples."""
    if not hasattr(data, "dropped"):
        return []
    firsts = [v["first"] for v in used.values() if v.get("first")]
    lasts = [v["last"] for v in used.values() if v.get("last")]
    if not firsts:
        return data.dropped()
    return data.dropped(min(firsts), max(lasts))


def run_meta(config: Config, data: Any, fs: Any) -> dict[str, Any]:
    idx = fs.factors.index
    level = confidence_level(config)
    period, plural = period_words(data.frequency)
    return {
        "fund": config["portfolio"]["name"], "nav": config["portfolio"]["nav"],
        "currency": config["portfolio"]["currency"],
        "sample_start": str(idx[0]), "sample_end": str(idx[-1]), "periods": int(len(idx)),
        "frequency": data.frequency, "period": period, "period_plural": plural,
        "periods_per_year": int(data.periods_per_year),
        "confidence": level, "level_label": level_label(level),
        "version": __version__, "config": config_file(config),
        "run_at": _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat(),
        "input_hashes": dict(sorted(data.hashes.items())),
        "factors": list(map(str, fs.factors.columns)),
        "factor_source": fs.source, "market": fs.market,
        "neutralise": list(config["hedge"]["neutralise"]),
        "keep": {k: list(v) for k, v in config["hedge"]["keep"].items()},
    }

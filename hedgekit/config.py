"""The TOML configuration: schema, defaults, validation.

One file per book. Paths are relative to the file. Unknown keys are an error naming the
key and the nearest valid one; a key that moved is an error naming its new place
(``MOVED``). Every section and key is listed in ``SCHEMA`` with its type, default and
allowed range; :func:`load_config` returns a frozen :class:`Config`.

Limits checked here, once (docs/interface.md):

* the configuration file must be a regular file of at most ``MAX_CONFIG_BYTES`` (1 MB):
  a device such as ``/dev/zero`` or a FIFO is refused before it is opened for reading;
* ``[portfolio] nav`` must be positive, finite and below ``MAX_NAV`` (1e13 in the book's
  currency: above the assets of any single fund, so a larger value is a typing slip;
  common practice, no source);
* ``[intervals] confidence`` (default 0.95) lies in [0.5, 1): the one level of every
  interval the tool reports;
* every number must be finite (TOML allows ``inf`` and ``nan``).
"""

from __future__ import annotations

import difflib
import math
import os
import stat
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from .errors import InputError

AUTO = "auto"
MAX_CONFIG_BYTES = 1_000_000
MAX_NAV = 1e13
UNIT_WORDS = ("decimal", "percent")
# [data] keys that name files; only these are ever opened or hashed.
DATA_FILES = ("states", "assets", "holdings", "portfolio_returns", "instruments", "instrument_sheet",
              "factors", "current_positions")
# Keys that moved: (section, key) -> where they live now.
MOVED = {("hedge", "confidence"): ("intervals", "confidence"),
         ("backtest", "min_months"): ("backtest", "min_periods")}

# key -> (kind, default, extra). Kinds: "path", "str", "int", "float", "float|none", "bool",
# "list[str]", "choice", "int|choice", "map[float]", "map[band]", "float|map[float]",
# "list[scenario]", "str|none", "units", "map[list[str]]".
# Files whose values ``units`` and ``accept_extreme`` may name (the sheet has its own units).
SERIES_FILES = ("states", "assets", "portfolio_returns", "instruments", "factors")
UNIT_FILES = SERIES_FILES + ("holdings", "current_positions")

SCHEMA: dict[str, dict[str, tuple[str, Any, Any]]] = {
    "data": {
        "states": ("path", None, None),
        "assets": ("path", None, None),
        "holdings": ("path", None, None),
        "portfolio_returns": ("path", None, None),
        "instruments": ("path", None, None),
        "instrument_sheet": ("path", None, None),
        "factors": ("path", None, None),
        "current_positions": ("path", None, None),
        "units": ("units", "decimal", UNIT_WORDS),
        "frequency": ("choice", "monthly", ("monthly", "quarterly", "daily")),
        "accept_extreme": ("map[list[str]]", {}, None),
    },
    "intervals": {
        "confidence": ("float", 0.95, (0.5, None)),
    },
    "portfolio": {
        "name": ("str", "Portfolio", None),
        "nav": ("float|none", None, None),
        "currency": ("str", "USD", None),
        "portfolio_column": ("str|none", None, None),
    },
    "states": {
        "market": ("str|none", None, None),
        "order": ("list[str]", None, None),
        "lags": ("int|choice", 1, ("aic", "bic", "hq")),
        "max_lags": ("int", 8, (1, 24)),
        "market_factor": ("choice", "return", ("return", "innovation")),
    },
    "exposures": {
        "window": ("int|choice", 60, ("full",)),
        "min_obs": ("int", 36, (3, None)),
        "hac_lags": ("int|choice", AUTO, (AUTO,)),
    },
    "premia": {
        "intercept": ("bool", True, None),
        "betas": ("choice", "full", ("full", "rolling")),
        "nw_lags": ("int|choice", AUTO, (AUTO,)),
        "traded": ("list[str]", (), None),
    },
    "hedge": {
        "neutralise": ("list[str]", (), None),
        "targets": ("map[float]", {}, None),
        "tolerance": ("float|map[float]", 0.0, (0.0, None)),
        "keep": ("map[band]", {}, None),
        "max_gross": ("float|none", None, (0.0, None)),
        "exclude": ("list[str]", (), None),
        "objective": ("choice", "tracking", ("tracking", "total")),
        "premium_weight": ("float", 0.0, (0.0, None)),
        "covariance": ("choice", "sample", ("sample", "ledoit-wolf")),
        "robust": ("bool", False, None),
        "closest": ("bool", False, None),
    },
    "stress": {
        "worst_k": ("int", 5, (1, 100)),
        "recession_quantile": ("float", 0.05, (0.001, 0.5)),
        "scenarios": ("list[scenario]", (), None),
    },
    "backtest": {
        "rebalance": ("choice", "quarterly", ("quarterly", "monthly")),
        "start": ("str|none", None, None),
        "window": ("int|choice", "expanding", ("expanding",)),
        "min_periods": ("int", 120, (24, None)),
    },
    "report": {
        "output": ("path", "hedgekit_output", None),
        "formats": ("list[str]", ("html", "md"), ("html", "md")),
    },
    "store": {
        "path": ("path", "hedgekit_runs.sqlite", None),
        "enabled": ("bool", True, None),
        "change_threshold": ("float", 0.25, (0.0, None)),
    },
}


def _nearest(word: str, options: list[str]) -> str:
    match = difflib.get_close_matches(word, options, n=1, cutoff=0.0)
    return match[0] if match else options[0]


def _freeze(value: Any) -> Any:
    if isinstance(value, Mapping):
        return MappingProxyType({k: _freeze(v) for k, v in value.items()})
    if isinstance(value, list):
        return tuple(_freeze(v) for v in value)
    return value


@dataclass(frozen=True)
class Config:
    """A validated configuration. ``sections[name][key]`` holds every value with defaults."""

    path: Path | None
    base: Path
    text: str
    sections: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)

    def __getitem__(self, section: str) -> Mapping[str, Any]:
        return self.sections[section]

    def data_path(self, key: str) -> Path | None:
        """The path of a [data] file key, or None when unset (only ``DATA_FILES`` are paths)."""
        value = self.sections["data"].get(key) if key in DATA_FILES else None
        return None if value is None else Path(value)

    def to_dict(self) -> dict[str, Any]:
        def thaw(v: Any) -> Any:
            if isinstance(v, Mapping):
                return {k: thaw(x) for k, x in v.items()}
            if isinstance(v, tuple):
                return [thaw(x) for x in v]
            if isinstance(v, Path):
                return str(v)
            return v
        return {s: thaw(v) for s, v in self.sections.items()}


def _check(section: str, key: str, value: Any, kind: str, extra: Any, where: str, base: Path) -> Any:
    name = f"[{section}] {key}"

    def bad(expected: str, fix: str | None = None) -> InputError:
        return InputError(f"{name} = {value!r} is not {expected}.", file=where,
                          fix=fix or f"set {key} to {expected}.")

    def in_range(x: float) -> float:
        if extra is not None and isinstance(extra, tuple) and len(extra) == 2 and not isinstance(extra[0], str):
            lo, hi = extra
            if lo is not None and x < lo:
                raise InputError(f"{name} = {x} is below the smallest allowed value {lo}.", file=where,
                                 fix=f"use a value of at least {lo}.")
            if hi is not None and x > hi:
                raise InputError(f"{name} = {x} is above the largest allowed value {hi}.", file=where,
                                 fix=f"use a value of at most {hi}.")
        return x

    if kind == "path":
        if not isinstance(value, str) or not value:
            raise bad("a file path in quotes")
        p = Path(value).expanduser()
        return p if p.is_absolute() else (base / p)
    if kind == "str":
        if not isinstance(value, str):
            raise bad("a string in quotes")
        return value
    if kind == "str|none":
        if value is None or isinstance(value, str):
            return value
        raise bad("a string in quotes")
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad("true or false")
        return value
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise bad("a whole number")
        return int(in_range(value))
    if kind in ("float", "float|none"):
        if kind == "float|none" and value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise bad("a number")
        if not math.isfinite(value):
            raise bad("a finite number")
        return float(in_range(float(value)))
    if kind == "choice":
        if value not in extra:
            raise InputError(f"{name} = {value!r} is not one of {', '.join(map(repr, extra))}.", file=where,
                             fix=f"did you mean {_nearest(str(value), list(extra))!r}?")
        return value
    if kind == "int|choice":
        if isinstance(value, int) and not isinstance(value, bool):
            if value < 0:
                raise bad("a non-negative whole number")
            return value
        if value in extra:
            return value
        raise InputError(f"{name} = {value!r} is neither a whole number nor one of "
                         f"{', '.join(map(repr, extra))}.", file=where,
                         fix=f"use a whole number or {extra[0]!r}.")
    if kind == "list[str]":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise bad('a list of names in quotes, e.g. ["term", "def"]')
        if extra is not None:
            for v in value:
                if v not in extra:
                    raise InputError(f"{name} contains {v!r}, not one of {', '.join(extra)}.", file=where,
                                     fix=f"did you mean {_nearest(v, list(extra))!r}?")
        return tuple(value)
    if kind == "map[float]":
        if not isinstance(value, dict) or not all(
                isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
                for v in value.values()):
            raise bad("a table of finite numbers, e.g. { term = 0.0 }")
        return {k: float(v) for k, v in value.items()}
    if kind == "units":
        return _check_units(value, name, extra, where)
    if kind == "map[list[str]]":
        example = '{ assets = ["biotech"] }'
        if not isinstance(value, dict):
            raise bad(f"a table of file keys and column lists, e.g. {example}")
        for k, cols in value.items():
            _file_key(k, name, SERIES_FILES, where)
            if (not isinstance(cols, list) or not cols
                    or not all(isinstance(c, str) and c for c in cols)):
                raise InputError(f"{name}.{k} = {cols!r} is not a list of column names.", file=where,
                                 fix=f"write e.g. {key} = {example}.")
        return {k: tuple(cols) for k, cols in value.items()}
    if kind == "float|map[float]":
        if isinstance(value, dict):
            out = _check(section, key, value, "map[float]", None, where, base)
            for v in out.values():
                in_range(v)
            return out
        return _check(section, key, value, "float", extra, where, base)
    if kind == "map[band]":
        if not isinstance(value, dict):
            raise bad("a table of [low, high] bands, e.g. { mkt = [0.95, 1.05] }")
        out = {}
        for k, band in value.items():
            if (not isinstance(band, list) or len(band) != 2
                    or not all(isinstance(b, int | float) and not isinstance(b, bool) for b in band)):
                raise InputError(f"[{section}] {key}.{k} = {band!r} is not a [low, high] pair of numbers.",
                                 file=where, fix=f"write {k} = [0.95, 1.05].")
            if band[0] > band[1]:
                raise InputError(f"[{section}] {key}.{k} has low {band[0]} above high {band[1]}.",
                                 file=where, fix="swap the two numbers.")
            out[k] = (float(band[0]), float(band[1]))
        return out
    if kind == "list[scenario]":
        if not isinstance(value, list):
            raise bad("a list of [[stress.scenarios]] tables")
        out = []
        for i, sc in enumerate(value, 1):
            if not isinstance(sc, dict):
                raise InputError(f"[[stress.scenarios]] number {i} is not a table.", file=where)
            unknown = set(sc) - {"name", "shocks", "reading"}
            if unknown:
                k = sorted(unknown)[0]
                raise InputError(f"[[stress.scenarios]] number {i} has unknown key {k!r}.", file=where,
                                 fix=f"did you mean {_nearest(k, ['name', 'shocks', 'reading'])!r}?")
            if not isinstance(sc.get("name"), str):
                raise InputError(f"[[stress.scenarios]] number {i} needs name = \"...\".", file=where)
            shocks = sc.get("shocks")
            if not isinstance(shocks, dict) or not shocks or not all(
                    isinstance(v, int | float) and not isinstance(v, bool) for v in shocks.values()):
                raise InputError(f"scenario {sc['name']!r} needs shocks = {{ term = 0.01 }} "
                                 "(natural units: decimals).", file=where)
            reading = sc.get("reading", "isolated")
            if reading not in ("isolated", "comove"):
                raise InputError(f"scenario {sc['name']!r} has reading = {reading!r}.", file=where,
                                 fix="use \"isolated\" or \"comove\".")
            out.append({"name": sc["name"], "shocks": {k: float(v) for k, v in shocks.items()},
                        "reading": reading})
        return tuple(out)
    raise AssertionError(kind)  # pragma: no cover - schema kinds are closed


def _file_key(key: str, name: str, allowed: tuple[str, ...], where: str) -> None:
    if key not in allowed:
        raise InputError(f"{name} names {key!r}, not a file key of [data].", file=where,
                         fix=f"did you mean {_nearest(key, list(allowed))!r}? Keys: {', '.join(allowed)}.")


def _check_units(value: Any, name: str, words: tuple[str, ...], where: str) -> Any:
    """``units``: one word for every series file, or ``{file: word | {column: word}}``."""
    example = 'units = { states = { dy = "percent" }, assets = "decimal" }'

    def word(w: Any, label: str) -> str:
        if w not in words:
            raise InputError(f"{label} = {w!r} is not one of {', '.join(map(repr, words))}.", file=where,
                             fix=f"did you mean {_nearest(str(w), list(words))!r}?")
        return w

    if isinstance(value, str):
        return word(value, name)
    if not isinstance(value, dict):
        raise InputError(f"{name} is neither a word nor a table.", file=where,
                         fix=f'write units = "percent", or per file and column: {example}.')
    out: dict[str, Any] = {}
    for k, v in value.items():
        _file_key(k, name, UNIT_FILES, where)
        if isinstance(v, dict):
            out[k] = {col: word(w, f"{name}.{k}.{col}") for col, w in v.items()}
        else:
            out[k] = word(v, f"{name}.{k}")
    return out


def parse_config(text: str, *, path: Path | None = None, base: Path | None = None) -> Config:
    """Parse and validate configuration text. Raises :class:`InputError` on any problem."""
    where = str(path) if path else "configuration"
    base = base if base is not None else (path.parent if path else Path.cwd())
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"TOML syntax error: {exc}.", file=where,
                         fix="correct the line named (strings need quotes, tables [brackets]).") from None
    sections: dict[str, dict[str, Any]] = {}
    for section, content in raw.items():
        if section not in SCHEMA:
            raise InputError(f"unknown section [{section}].", file=where,
                             fix=f"did you mean [{_nearest(section, list(SCHEMA))}]?")
        if not isinstance(content, dict):
            raise InputError(f"{section} must be a [{section}] table.", file=where)
        for key in content:
            if (section, key) in MOVED:
                new_s, new_k = MOVED[(section, key)]
                raise InputError(f"[{section}] {key} has moved to [{new_s}] {new_k}.", file=where,
                                 fix=f"write {new_k} = {content[key]!r} under [{new_s}] instead.")
            if key not in SCHEMA[section]:
                raise InputError(f"unknown key {key!r} in [{section}].", file=where,
                                 fix=f"did you mean {_nearest(key, list(SCHEMA[section]))!r}? "
                                     f"Valid keys: {', '.join(SCHEMA[section])}.")
    for section, keys in SCHEMA.items():
        content = raw.get(section, {})
        values: dict[str, Any] = {}
        for key, (kind, default, extra) in keys.items():
            if key in content:
                values[key] = _check(section, key, content[key], kind, extra, where, base)
            elif kind == "path" and default is not None:
                values[key] = base / default
            else:
                values[key] = default
        sections[section] = values
    nav = sections["portfolio"]["nav"]
    if nav is not None and nav <= 0:
        raise InputError(f"[portfolio] nav = {nav} must be positive.", file=where,
                         fix="give the net asset value in currency units, e.g. nav = 250_000_000.")
    if nav is not None and nav >= MAX_NAV:
        raise InputError(f"[portfolio] nav = {nav:.4g} is beyond any plausible fund size "
                         f"(limit {MAX_NAV:.0e} in the book's currency).", file=where,
                         fix="give the net asset value in currency units, e.g. nav = 250_000_000.")
    level = sections["intervals"]["confidence"]
    if not level < 1.0:
        raise InputError(f"[intervals] confidence = {level} must be below 1.", file=where,
                         fix="use a level in [0.5, 1), e.g. 0.95 or 0.9.")
    lags = sections["states"]["lags"]
    if isinstance(lags, int) and not 1 <= lags <= 24:
        raise InputError(f"[states] lags = {lags} is outside 1..24.", file=where,
                         fix='use a small whole number such as 1, or "bic" to choose it.')
    ex = sections["exposures"]
    if isinstance(ex["window"], int) and ex["window"] < ex["min_obs"]:
        raise InputError(f"[exposures] window = {ex['window']} is shorter than min_obs = {ex['min_obs']}.",
                         file=where, fix="raise window or lower min_obs.")
    return Config(path=path, base=base, text=text,
                  sections=MappingProxyType({s: _freeze(v) for s, v in sections.items()}))


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML configuration file.

    Only a regular file of at most ``MAX_CONFIG_BYTES`` is read: a device (``/dev/zero``),
    a FIFO or a socket is refused before it is opened, so reading can neither hang nor
    exhaust memory.
    """
    path = Path(path)
    try:
        info = path.stat()
    except FileNotFoundError:
        raise InputError("configuration file not found.", file=str(path),
                         fix="pass the path of a .toml file, e.g. demo_portfolios/larkspur.toml.") from None
    except OSError as exc:
        raise InputError(f"cannot read the configuration file ({exc.strerror}).", file=str(path),
                         fix="check the path and its permissions.") from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError("is a folder, not a configuration file.", file=str(path),
                         fix="pass the .toml file inside it.")
    if not stat.S_ISREG(info.st_mode):
        raise InputError("is not a regular file (a device, FIFO or socket).", file=str(path),
                         fix="pass the path of a .toml file.")
    if info.st_size > MAX_CONFIG_BYTES:
        raise InputError(f"is {info.st_size:,} bytes, above the {MAX_CONFIG_BYTES:,}-byte limit for a "
                         "configuration file.", file=str(path), fix="pass the book's .toml file.")
    try:
        with open(path, "rb", opener=lambda p, f: os.open(p, f | os.O_NONBLOCK)) as fh:
            raw = fh.read(MAX_CONFIG_BYTES + 1)
    except OSError as exc:
        raise InputError(f"cannot read the configuration file ({exc.strerror}).", file=str(path),
                         fix="check the path and its permissions.") from None
    if len(raw) > MAX_CONFIG_BYTES:
        raise InputError(f"grew beyond the {MAX_CONFIG_BYTES:,}-byte limit while being read.",
                         file=str(path), fix="pass the book's .toml file.")
    try:
        text = raw.decode("utf-8-sig")  # a byte-order mark is fine
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=str(path), fix="save it as UTF-8.") from None
    return parse_config(text, path=path, base=path.resolve().parent)

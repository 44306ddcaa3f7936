"""The quarterly exposure report: HTML and Markdown from the run dictionary.

The run dictionary is the merged JSON of the stages (``meta``, ``states``, ``exposures``,
``premia``, ``hedge``, ``stress``, ``backtest``, ``warnings``, ``cautions``; see
docs/interface.md). :func:`~hedgekit.present.document.build_document` turns it into a
neutral document (the same one the terminal prints); the Jinja2 templates in
``templates/`` render it, the HTML with autoescaping on, the Markdown through an escaping
filter. :func:`build_report` renders everything in memory and stages the files beside the
output folder; ``staged.publish()`` switches the folder to them in one atomic step
(:mod:`hedgekit.present.publish`), so a failure or a kill at any moment leaves the earlier
report whole. Call it after the run is recorded in the store.

The HTML is self-contained: inline CSS, figures as PNG data URIs, no script and no external
reference; it prints on A4 and Letter (print CSS, no page break inside a table or figure).
Same run, same bytes: nothing depends on dict order or time but the run's own timestamp.
"""

from __future__ import annotations

import base64
import re
from collections.abc import Iterable, Mapping
from functools import cache
from pathlib import Path
from typing import Any

from jinja2 import Environment, PackageLoader, StrictUndefined
from markupsafe import Markup, escape

from ..errors import InputError
from .document import Bullets, Document, Para, Plot, Table, Tiles, build_document
from .publish import StagedOutput, stage_files

FORMATS = ("html", "md")
# Every figure a report can carry: its files are replaced (or dropped) with each new report.
FIGURE_KEYS = ("exposures", "rolling", "premia", "stress", "backtest")

_KINDS = {Para: "para", Bullets: "bullets", Table: "table", Plot: "plot", Tiles: "tiles"}


def _kind(block: Any) -> str:
    return _KINDS[type(block)]


def _cell(text: Any) -> Markup:
    """Escaped cell text with a break opportunity after each underscore of an identifier."""
    return Markup(str(escape(str(text))).replace("_", "_<wbr>"))


_MD_SPECIAL = re.compile(r"([\\`*\[\]#|])")
_MD_TAG = re.compile(r"<(?=[A-Za-z/!?])")       # what could open raw HTML (CommonMark 6.6)
_MD_ENTITY = re.compile(r"&(?=#|[A-Za-z][A-Za-z0-9]*;)")


def _md(text: Any) -> str:
    """Markdown-safe text: markup characters backslash-escaped; a "<" that could open an HTML
    tag and an "&" that could start an entity written as entities, so no record string becomes
    markup (a plain "p < 0.001" stays readable)."""
    s = _MD_ENTITY.sub("&amp;", str(text))
    s = _MD_TAG.sub("&lt;", s)
    s = _MD_SPECIAL.sub(r"\\\1", s)
    return " ".join(s.splitlines())


@cache
def _env(markdown: bool) -> Environment:
    env = Environment(loader=PackageLoader("hedgekit.present", "templates"), autoescape=not markdown,
                      undefined=StrictUndefined, keep_trailing_newline=True,
                      trim_blocks=markdown, lstrip_blocks=markdown)
    env.filters.update(kind=_kind, cell=_cell, md=_md)
    return env


def render_html(doc: Document, figures: Mapping[str, bytes]) -> str:
    """The document as one self-contained HTML page; ``figures`` holds each plot's PNG."""
    uris = {k: base64.b64encode(v).decode("ascii") for k, v in figures.items()}
    return _env(False).get_template("report.html.j2").render(doc=doc, figures=uris)


def render_markdown(doc: Document, figure_files: Mapping[str, str] | None = None) -> str:
    """The document as Markdown; figures link to ``figure_files[key]`` or are noted as omitted."""
    text = _env(True).get_template("report.md.j2").render(doc=doc, figure_files=dict(figure_files or {}))
    return re.sub(r"\n{3,}", "\n\n", text)


def _check(formats: tuple[str, ...], name: str) -> None:
    unknown = [f for f in formats if f not in FORMATS]
    if unknown or not formats:
        raise InputError(f"unknown report format {unknown[0]!r}." if unknown else "no report format asked for.",
                         column="formats", fix="use 'html', 'md' or both.")
    if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9._-]*", name):
        raise InputError(f"report name {name!r} is not a plain file name.", column="name",
                         fix="use letters, digits, '.', '_' or '-' only.")


def build_report(run: Mapping, out_dir: Path | str, *, formats: Iterable[str] = ("html", "md"),
                 name: str = "report", markdown_figures: bool = True) -> StagedOutput:
    """Render ``<name>.html`` / ``<name>.md`` (and the Markdown's PNG figures) and stage them
    beside ``out_dir``; nothing visible changes until ``.publish()`` on the result, which
    returns ``{"html": path, "md": path, "figure_<key>": path, ...}``.

    Other files in the folder (an earlier ``--as-of`` report, say) are kept; this report's
    own earlier figures are replaced or dropped.
    """
    formats = tuple(formats)
    _check(formats, name)
    doc = build_document(run)
    figures = {p.key: p.draw() for p in doc.plots()}
    files: dict[str, bytes] = {}
    keys: dict[str, str] = {}
    if "md" in formats:
        figure_files: dict[str, str] = {}
        if markdown_figures:
            for key, png in figures.items():
                figure_files[key] = keys[f"figure_{key}"] = f"{name}_{key}.png"
                files[figure_files[key]] = png
        keys["md"] = f"{name}.md"
        files[keys["md"]] = render_markdown(doc, figure_files).encode("utf-8")
    if "html" in formats:
        keys["html"] = f"{name}.html"
        files[keys["html"]] = render_html(doc, figures).encode("utf-8")
    drop = {f"{name}.html", f"{name}.md", *(f"{name}_{k}.png" for k in FIGURE_KEYS)}
    return stage_files(out_dir, files, keys=keys, drop=drop, what="report",
                       fix="set [report] output to a folder you can write to.")


def publish_report(run: Mapping, out_dir: Path | str, *, formats: Iterable[str] = ("html", "md"),
                   name: str = "report", markdown_figures: bool = True) -> dict[str, Path]:
    """:func:`build_report` and publish at once: the paths of the published files."""
    return build_report(run, out_dir, formats=formats, name=name, markdown_figures=markdown_figures).publish()

"""The run report: one HTML page and one Markdown file with the figures and the key numbers.

Layout of a report folder (owned here)::

    <folder>/index.html         self-contained page (inline style, no scripts, no network); the
                                figures are files beside it, linked by relative paths
    <folder>/report.md          the same content in Markdown
    <folder>/figures/<stem>.png (and .svg / .pdf, .gif for animations)

Key numbers are given as :class:`Section` objects holding ``(quantity, value, unit)`` rows; values
are formatted by the caller, so every number a reader sees carries its unit.  Both files are
written atomically; an existing report is not replaced unless ``force``.
"""

from __future__ import annotations

import datetime as _dt
import html
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from retina.io.atomic import atomic_write_text, check_writable

__all__ = ["Section", "FigureEntry", "write_report", "render_html", "render_markdown"]


@dataclass(frozen=True)
class Section:
    """A titled table of key numbers: rows of ``(quantity, value, unit)`` strings."""

    title: str
    rows: Sequence[tuple[str, str, str]]
    note: str = ""


@dataclass(frozen=True)
class FigureEntry:
    """One figure of the report.

    Attributes
    ----------
    stem : str
        Path of the figure relative to the report folder, without extension (``figures/yield``).
    title, caption : str
        Shown under the figure; the caption carries units and parameters.
    formats : tuple of str
        Files that exist beside the PNG (``("png", "svg")``); the page shows the PNG (or the GIF
        for an animation) and links the others.
    animation : bool
        True when ``stem.gif`` is the figure.
    """

    stem: str
    title: str
    caption: str
    formats: tuple[str, ...] = ("png", "svg")
    animation: bool = False

    @property
    def shown(self) -> str:
        """The file the report shows: the GIF of an animation, else the PNG."""
        return f"{self.stem}.gif" if self.animation else f"{self.stem}.png"


_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; max-width: 60rem; margin: 2rem auto;
       padding: 0 1rem; color: #1b1b1b; line-height: 1.45; }
h1 { font-size: 1.6rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.2rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
.meta { color: #555; font-size: 0.9rem; }
table { border-collapse: collapse; margin: 0.5rem 0 1rem; }
th, td { padding: 0.2rem 0.8rem; border-bottom: 1px solid #e3e3e3; text-align: left; }
td.v { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1.2rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.9rem; color: #333; }
pre { background: #f6f6f6; padding: 0.6rem; overflow-x: auto; font-size: 0.8rem; }
"""


def render_html(title: str, sections: Sequence[Section], figures: Sequence[FigureEntry], *,
                intro: str = "", scenario_text: str = "", provenance: dict | None = None) -> str:
    """The report page as HTML text (see the module docstring).

    Parameters
    ----------
    title : str
        Page title.
    sections : sequence of Section
        Tables of key numbers.
    figures : sequence of FigureEntry
        Figures shown, in order.
    intro : str
        A paragraph under the title.
    scenario_text : str
        The scenario file, shown verbatim.
    provenance : dict, optional
        Shown as a table of ``key | value``.

    Returns
    -------
    str
        A self-contained HTML document.
    """
    e = html.escape
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           f"<title>{e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>",
           f"<h1>{e(title)}</h1>"]
    if intro:
        out.append(f'<p class="meta">{e(intro)}</p>')
    out.append("<h2>Key numbers</h2>")
    for sec in sections:
        out.append(f"<h3>{e(sec.title)}</h3>")
        if sec.note:
            out.append(f"<p>{e(sec.note)}</p>")
        out.append("<table><tr><th>quantity</th><th>value</th><th>unit</th></tr>")
        for q, v, u in sec.rows:
            out.append(f'<tr><td>{e(q)}</td><td class="v">{e(v)}</td><td>{e(u)}</td></tr>')
        out.append("</table>")
    out.append("<h2>Figures</h2>")
    for i, f in enumerate(figures, 1):
        links = " ".join(f'<a href="{e(f.stem)}.{fmt}">{fmt.upper()}</a>' for fmt in f.formats)
        out.append(f'<figure id="fig{i}"><img src="{e(f.shown)}" alt="{e(f.title)}">'
                   f"<figcaption><b>Figure {i}. {e(f.title)}.</b> {e(f.caption)} {links}</figcaption></figure>")
    if provenance:
        out.append("<h2>Provenance</h2><table>")
        for k, v in _flat(provenance):
            out.append(f"<tr><td>{e(k)}</td><td>{e(str(v))}</td></tr>")
        out.append("</table>")
    if scenario_text:
        out.append(f"<h2>Scenario</h2><pre>{e(scenario_text)}</pre>")
    out += ["</body>", "</html>", ""]
    return "\n".join(out)


def _md_cell(s: str) -> str:
    return str(s).replace("|", "\\|").replace("\n", " ")


def render_markdown(title: str, sections: Sequence[Section], figures: Sequence[FigureEntry], *,
                    intro: str = "", scenario_text: str = "", provenance: dict | None = None) -> str:
    """The report as Markdown text (same content as :func:`render_html`).

    Parameters
    ----------
    title, sections, figures, intro, scenario_text, provenance
        As in :func:`render_html`.

    Returns
    -------
    str
        The Markdown document.
    """
    out = [f"# {title}", ""]
    if intro:
        out += [intro, ""]
    out += ["## Key numbers", ""]
    for sec in sections:
        out += [f"### {sec.title}", ""]
        if sec.note:
            out += [sec.note, ""]
        out += ["| quantity | value | unit |", "|---|---:|---|"]
        out += [f"| {_md_cell(q)} | {_md_cell(v)} | {_md_cell(u)} |" for q, v, u in sec.rows]
        out.append("")
    out += ["## Figures", ""]
    for i, f in enumerate(figures, 1):
        links = ", ".join(f"[{fmt.upper()}]({f.stem}.{fmt})" for fmt in f.formats)
        out += [f"![{f.title}]({f.shown})", "", f"**Figure {i}. {f.title}.** {f.caption}" + (f" ({links})" if links else ""), ""]
    if provenance:
        out += ["## Provenance", "", "| key | value |", "|---|---|"]
        out += [f"| {_md_cell(k)} | {_md_cell(v)} |" for k, v in _flat(provenance)]
        out.append("")
    if scenario_text:
        out += ["## Scenario", "", "```toml", scenario_text.rstrip("\n"), "```", ""]
    return "\n".join(out)


def _flat(d: dict, prefix: str = ""):
    for k, v in d.items():
        if isinstance(v, dict):
            yield from _flat(v, f"{prefix}{k}.")
        else:
            yield f"{prefix}{k}", v


def write_report(folder: str | Path, title: str, sections: Sequence[Section],
                 figures: Sequence[FigureEntry], *, intro: str = "", scenario_text: str = "",
                 provenance: dict | None = None, force: bool = False) -> tuple[Path, Path]:
    """Write ``index.html`` and ``report.md`` into ``folder`` (which must exist).

    Parameters
    ----------
    folder : str or Path
    title : str
    sections : sequence of Section
    figures : sequence of FigureEntry
        Their files must already be in ``folder`` (checked, so a report never links to nothing).
    intro, scenario_text : str
    provenance : dict, optional
        Shown as a table (nested dicts flattened to dotted keys).
    force : bool
        Replace an existing report.

    Returns
    -------
    (Path, Path)
        The HTML and Markdown files.

    Raises
    ------
    retina.errors.InputError
        The report exists and ``force`` is false, or a figure file is missing.
    """
    from retina.errors import InputError

    folder = Path(folder)
    for f in figures:
        for name in [f.shown] + [f"{f.stem}.{fmt}" for fmt in f.formats]:
            if not (folder / name).is_file():
                raise InputError(f"figure file missing: {name}", source=folder, key="figures")
    html_path, md_path = folder / "index.html", folder / "report.md"
    for p in (html_path, md_path):
        check_writable(p, force=force)
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    intro = f"{intro} Generated {stamp}." if intro else f"Generated {stamp}."
    kw = dict(intro=intro, scenario_text=scenario_text, provenance=provenance)
    atomic_write_text(md_path, render_markdown(title, sections, figures, **kw), force=force)
    atomic_write_text(html_path, render_html(title, sections, figures, **kw), force=force)
    return html_path, md_path

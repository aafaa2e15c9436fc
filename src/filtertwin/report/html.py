"""A self-contained HTML report built from generic sections.

Any part of filtertwin (render, the checks) describes what it wants to show as
:class:`ReportSection` objects: a heading, paragraphs, tables and PNG figures. :func:`render_html`
turns a list of sections into one HTML page whose images are embedded (base64), so the page can
be mailed or archived alone; :func:`write_html` writes it atomically.

Examples
--------
>>> section = ReportSection(
...     "Stages", ["Parts as built."], tables=[(("stage", "f0"), [("1", "300 Hz")])]
... )
>>> page = render_html("Crossover", [section])
>>> "<table>" in page
True
"""

from __future__ import annotations

import base64
import html
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from filtertwin.files.outputs import atomic_path

__all__ = ["CAUTION", "ReportSection", "Table", "render_html", "write_html"]

CAUTION = (
    "Caution: loud playback harms hearing and drivers, and full-range or low-frequency signal "
    "destroys tweeters. Check the levels before playing the outputs, and start quiet."
)

Table = tuple[Sequence[str], Sequence[Sequence[object]]]
"""A table: header cells and rows of cells (anything; shown with ``str``)."""

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 72rem; margin: 1.5rem auto;
       padding: 0 1rem; color: #1a1a1a; line-height: 1.45; }
h1 { font-size: 1.6rem; margin-bottom: 0.2rem; } h2 { font-size: 1.25rem; margin-top: 2rem;
     border-bottom: 1px solid #ccc; padding-bottom: 0.2rem; }
table { border-collapse: collapse; margin: 0.8rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #bbb; padding: 0.2rem 0.55rem; text-align: left; }
th { background: #eee; } tr:nth-child(even) td { background: #fafafa; }
td.verdict-pass { color: #11632b; font-weight: 600; }
td.verdict-fail { color: #a1141b; font-weight: 600; }
figure { margin: 1rem 0; } figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: 0.85rem; color: #555; }
.caution { background: #fff4d6; border: 1px solid #e0b040; padding: 0.6rem 0.8rem; }
"""


@dataclass(frozen=True)
class ReportSection:
    """One section of a report.

    Attributes
    ----------
    heading : str
        Section title.
    paragraphs : sequence of str
        Plain-text paragraphs (escaped; no markup).
    tables : sequence of Table
        ``(header, rows)`` pairs. A cell whose text is ``PASS`` or ``FAIL`` is coloured.
    figures : sequence of path-like
        PNG files, embedded in the page; the file name (without extension, ``_`` and ``-``
        read as spaces) is the caption unless ``captions`` gives one.
    captions : sequence of str
        Optional captions, one per figure in order.
    """

    heading: str
    paragraphs: Sequence[str] = ()
    tables: Sequence[Table] = ()
    figures: Sequence[str | os.PathLike[str]] = ()
    captions: Sequence[str] = field(default=())


def _cell(value: object, tag: str) -> str:
    text = html.escape(str(value))
    verdict = str(value).strip().upper()
    if tag == "td" and verdict in ("PASS", "FAIL"):
        return f'<td class="verdict-{verdict.lower()}">{text}</td>'
    return f"<{tag}>{text}</{tag}>"


def _table(table: Table) -> str:
    header, rows = table
    head = "".join(_cell(h, "th") for h in header)
    body = "\n".join("<tr>" + "".join(_cell(c, "td") for c in row) + "</tr>" for row in rows)
    return f"<table>\n<thead><tr>{head}</tr></thead>\n<tbody>\n{body}\n</tbody>\n</table>"


def _figure(path: Path, caption: str | None) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    text = html.escape(caption or path.stem.replace("_", " ").replace("-", " "))
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{text}">'
        f"<figcaption>{text}</figcaption></figure>"
    )


def _section(section: ReportSection) -> str:
    parts = [f"<section>\n<h2>{html.escape(section.heading)}</h2>"]
    parts += [f"<p>{html.escape(p)}</p>" for p in section.paragraphs]
    parts += [_table(t) for t in section.tables]
    captions = list(section.captions)
    for i, fig in enumerate(section.figures):
        parts.append(_figure(Path(fig), captions[i] if i < len(captions) else None))
    parts.append("</section>")
    return "\n".join(parts)


def render_html(
    title: str, sections: Iterable[ReportSection], *, caution: str | None = CAUTION
) -> str:
    """The report as one self-contained HTML page.

    Parameters
    ----------
    title : str
        Page title and top heading.
    sections : iterable of ReportSection
        In order of appearance.
    caution : str or None
        A highlighted safety line under the title (default :data:`CAUTION`).

    Returns
    -------
    str
        UTF-8 HTML; every figure embedded as a base64 PNG.

    Raises
    ------
    FileNotFoundError
        A figure path that does not exist.
    """
    body = [f"<h1>{html.escape(title)}</h1>"]
    if caution:
        body.append(f'<p class="caution">{html.escape(caution)}</p>')
    body += [_section(s) for s in sections]
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f"<title>{html.escape(title)}</title>\n<style>{_STYLE}</style>\n</head>\n<body>\n"
        + "\n".join(body)
        + "\n</body>\n</html>\n"
    )


def write_html(
    path: str | os.PathLike[str],
    title: str,
    sections: Iterable[ReportSection],
    *,
    caution: str | None = CAUTION,
    protect: Iterable[str | os.PathLike[str]] = (),
) -> Path:
    """Write :func:`render_html` to ``path`` under a temporary name, then rename it.

    Parameters
    ----------
    path : path-like
        The report file (its folder must exist).
    title, sections, caution
        As for :func:`render_html`.
    protect : iterable of path-like
        Inputs that must never be overwritten.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    UserInputError
        A protected path or a missing folder.
    """
    page = render_html(title, sections, caution=caution)
    with atomic_path(path, protect=protect) as temporary:
        temporary.write_text(page, encoding="utf-8")
    return Path(path)

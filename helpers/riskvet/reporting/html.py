"""Reviewer renderings: one self-contained HTML file per executed notebook.

The rendering hides code cells by default (a reviewer reads tables, figures
and their interpretation), embeds every image as a data URI, and loads
nothing from the network: the script tags that would fetch require.js,
MathJax, Mermaid or the widget manager from a content delivery network are
left out, so the file opens the same offline, years later.  Mathematics in
markdown therefore shows as its TeX source.
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from ..errors import RecordError, RiskvetError, problem

__all__ = ["render_html", "external_references", "PageHeader", "STAGE_TITLES", "PAGE_STYLE", "page_header_html", "write_index"]

#: The title of each stage's page, in words.
STAGE_TITLES = {
    "planning": "Sample-size planning",
    "derivation": "Derivation",
    "agreement": "Agreement between raters",
    "internal_validation": "Internal validation",
    "internal_external": "Internal-external cross-validation",
    "external_validation": "External validation",
    "updating": "Model updating",
    "summary": "Summary of the record",
}

#: The look of every record page: one column of readable width, tables that
#: turn into labelled rows on a narrow screen, figures scaled to the column.
PAGE_STYLE = """
:root { --rv-ink: #1d2733; --rv-muted: #55606e; --rv-rule: #c9d1da; --rv-band: #eef3f7; --rv-accent: #0b5d7a; }
body.jp-Notebook, body { color: var(--rv-ink); font-family: "Source Sans 3", "Segoe UI", Helvetica, Arial, sans-serif;
  font-size: 16px; line-height: 1.5; margin: 0; padding: 0; overflow-wrap: break-word; }
main, body.jp-Notebook > main, .jp-Notebook { max-width: 58rem; margin-left: auto; margin-right: auto; padding: 0 1rem 3rem; box-sizing: border-box; }
.jp-Cell, .jp-Cell-outputWrapper, .jp-OutputArea, .jp-OutputArea-child, .jp-OutputArea-output, .jp-RenderedHTMLCommon,
.jp-RenderedMarkdown { max-width: 100%; min-width: 0; box-sizing: border-box; padding-left: 0; padding-right: 0; }
.jp-OutputArea-prompt, .jp-InputPrompt, .jp-OutputPrompt { display: none; }
.jp-Cell-inputWrapper .jp-InputArea { max-width: 100%; overflow-x: auto; }
h1, h2, h3 { line-height: 1.25; color: var(--rv-ink); }
h2 { border-top: 1px solid var(--rv-rule); padding-top: 0.8rem; margin-top: 2rem; }
.jp-InternalAnchorLink { display: none; }
.rv-header { background: var(--rv-band); border-bottom: 3px solid var(--rv-accent); padding: 0.8rem 1rem; margin: 0 -1rem 1rem; }
.rv-header .rv-study { font-weight: 700; font-size: 1.05rem; }
.rv-header .rv-meta { color: var(--rv-muted); font-size: 0.9rem; }
.rv-header nav ol { list-style: none; padding: 0; margin: 0.5rem 0 0; display: flex; flex-wrap: wrap; gap: 0.3rem 1rem; }
.rv-header nav a { color: var(--rv-accent); }
.rv-header nav [aria-current="page"] { font-weight: 700; color: var(--rv-ink); text-decoration: none; }
.rv-status { display: inline-block; padding: 0 0.4rem; border-radius: 0.2rem; border: 1px solid currentColor; font-size: 0.85rem; }
.rv-status-failed, .rv-status-interrupted { color: #a1330a; }
.rv-failure { border: 3px solid #a1330a; padding: 0.6rem 1rem; font-weight: 700; }
.rv-table { max-width: 100%; overflow-x: auto; margin: 0.5rem 0 1.2rem; }
.rv-table table, .jp-RenderedHTMLCommon .rv-table table { border-collapse: collapse; font-size: 0.92rem; width: auto; max-width: 100%; table-layout: auto; }
.rv-table caption { caption-side: top; text-align: left; color: var(--rv-muted); font-style: italic; padding-bottom: 0.3rem; }
.rv-table th, .rv-table td, .jp-RenderedHTMLCommon .rv-table th, .jp-RenderedHTMLCommon .rv-table td {
  border: none; border-bottom: 1px solid var(--rv-rule); padding: 0.25rem 0.6rem; text-align: left; vertical-align: top; white-space: normal; }
.rv-table thead th { border-bottom: 2px solid var(--rv-ink); font-weight: 600; }
.rv-table table.rv-fixed { table-layout: fixed; width: 100%; }
.rv-table table.rv-fixed th, .rv-table table.rv-fixed td, .rv-table table.rv-fixed .rv-num { overflow-wrap: anywhere; white-space: normal; }
.rv-table .rv-num, .jp-RenderedHTMLCommon .rv-table .rv-num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.rv-table tbody tr:nth-child(even) { background: #f7f9fb; }
.rv-figure { margin: 0.8rem 0 1.4rem; }
.rv-figure img { display: block; max-width: 100%; height: auto; }
.rv-figure figcaption { color: var(--rv-muted); font-size: 0.9rem; }
.rv-equation { display: block; max-width: 100%; overflow-wrap: normal; white-space: normal; font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace;
  font-size: 0.9rem; background: var(--rv-band); padding: 0.6rem 0.8rem; }
.rv-equation .rv-term { white-space: nowrap; }
.jp-RenderedHTMLCommon img, .jp-OutputArea-output img { max-width: 100%; height: auto; }
.jp-RenderedHTMLCommon pre, .jp-OutputArea-output pre { white-space: pre-wrap; overflow-wrap: anywhere; }
.rv-empty { color: var(--rv-muted); font-style: italic; }
@media (max-width: 40rem) {
  body { font-size: 15px; }
  .rv-table { overflow-x: visible; }
  .rv-table table, .rv-table tbody, .rv-table tr, .rv-table td { display: block; width: 100%; box-sizing: border-box; }
  .rv-table thead { position: absolute; width: 1px; height: 1px; overflow: hidden; clip: rect(0 0 0 0); }
  .rv-table tr { border-bottom: 2px solid var(--rv-rule); padding: 0.3rem 0; }
  .rv-table td, .jp-RenderedHTMLCommon .rv-table td, .rv-table .rv-num, .jp-RenderedHTMLCommon .rv-table .rv-num {
    border: none; display: flex; justify-content: space-between; gap: 1rem; text-align: right; padding: 0.1rem 0.2rem; white-space: normal; }
  .rv-table td::before { content: attr(data-label); text-align: left; color: var(--rv-muted); font-weight: 600; flex: 1 1 50%; min-width: 0; }
  .rv-table td > * , .rv-table td { min-width: 0; overflow-wrap: anywhere; }
  .rv-header nav ol { display: block; }
}
"""


@dataclass(frozen=True)
class PageHeader:
    """What the top of every record page says.

    Attributes
    ----------
    study_name : str
        The study's name.
    record_id : str
        The record's id (its folder name).
    record_status : str
        ``complete``, ``failed`` or ``interrupted``.
    stage : str or None
        The stage of this page (None for the record's index page).
    pages : tuple of (str, str, str)
        Every stage of the run as (stage, page file name, stage status); a
        stage without a page has an empty file name.
    """

    study_name: str
    record_id: str
    record_status: str
    stage: str | None
    pages: tuple[tuple[str, str, str], ...]

    @property
    def title(self) -> str:
        what = STAGE_TITLES.get(self.stage, str(self.stage).replace("_", " ")) if self.stage else "Analysis record"
        return f"{what} – {self.study_name}"


def page_header_html(header: PageHeader) -> str:
    """The header block of a page: study, record, status and links to every page."""
    esc = html.escape
    items = [f'<li><a href="index.html"{_current(header.stage is None)}>Contents</a></li>']
    for stage, href, status in header.pages:
        words = esc(STAGE_TITLES.get(stage, stage.replace("_", " ")))
        flag = "" if status == "ok" else f' <span class="rv-status rv-status-{esc(status)}">{esc(_STATUS_WORDS.get(status, status))}</span>'
        if href:
            items.append(f'<li><a href="{esc(href, quote=True)}"{_current(stage == header.stage)}>{words}</a>{flag}</li>')
        else:
            items.append(f"<li>{words}{flag}</li>")
    status = esc(_STATUS_WORDS.get(header.record_status, header.record_status))
    return (
        f'<style>{PAGE_STYLE}</style><header class="rv-header"><div class="rv-study">{esc(header.study_name)}</div>'
        f'<div class="rv-meta">Analysis record {esc(header.record_id)} · '
        f'<span class="rv-status rv-status-{esc(header.record_status)}">{status}</span></div>'
        f'<nav aria-label="Pages of this record"><ol>{"".join(items)}</ol></nav></header>'
    )


_STATUS_WORDS = {
    "ok": "done", "complete": "record complete", "failed": "failed", "interrupted": "interrupted",
    "skipped": "not run (an earlier stage failed)", "not run": "not run", "pending": "not run",
}


def _current(yes: bool) -> str:
    return ' aria-current="page"' if yes else ""


def write_index(path: str | Path, header: PageHeader, *, sections: Sequence[tuple[str, str]] = ()) -> Path:
    """Write the record's ``index.html``: the header, the caution and ``sections``.

    Parameters
    ----------
    path : path
        The file to write; must not exist.
    header : PageHeader
        With ``stage`` None.
    sections : sequence of (str, str)
        (heading, HTML body) pairs, each body already published through
        :mod:`riskvet.reporting.publish`.
    """
    path = Path(path)
    if path.exists():
        raise RecordError(f"{path}: already exists; a record file is never overwritten")
    body = "".join(f"<section><h2>{html.escape(title)}</h2>{content}</section>" for title, content in sections)
    document = (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{html.escape(header.title)}</title></head><body><main>{page_header_html(header)}"
        f"<h1>{html.escape(header.study_name)}: analysis record</h1>{body}</main></body></html>\n"
    )
    fetched = external_references(document, links=False)
    if fetched:
        raise RecordError(f"{path}: the index would load {fetched[0]!r} from the network; a record page must open offline")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(document, encoding="utf-8")
    return path


# Blocks of nbconvert's "lab" template that load scripts from the network.
_OFFLINE_TEMPLATE = """\
{%- extends 'index.html.j2' -%}
{%- block html_head_js -%}{%- endblock html_head_js -%}
{%- block jupyter_widgets -%}{%- endblock jupyter_widgets -%}
{%- block html_head_js_mathjax -%}{%- endblock html_head_js_mathjax -%}
{%- block html_head_js_mermaidjs -%}{%- endblock html_head_js_mermaidjs -%}
"""

_TAG = re.compile(r"<([a-zA-Z][\w:-]*)((?:[^>\"']|\"[^\"]*\"|'[^']*')*)>")
_ATTRIBUTE = re.compile(r"""\b(src|href|action|poster|data|srcset)\s*=\s*["']?\s*((?:https?:)?//[^"'\s>]*)""", re.IGNORECASE)
_CSS = re.compile(r"""(?:url\(\s*["']?\s*|@import\s+["'])((?:https?:)?//[^"'\s)]*)""", re.IGNORECASE)


def _exporter(*, show_code: bool):
    import jinja2
    from nbconvert import HTMLExporter

    from nbconvert.preprocessors import TagRemovePreprocessor

    exporter = HTMLExporter(
        template_name="lab",
        extra_loaders=[jinja2.DictLoader({"riskvet_offline.html.j2": _OFFLINE_TEMPLATE})],
        template_file="riskvet_offline.html.j2",
        exclude_input=not show_code,
        exclude_input_prompt=True,
        exclude_output_prompt=True,
        embed_images=True,
    )
    exporter.register_preprocessor(TagRemovePreprocessor(remove_input_tags={"riskvet-page"}), enabled=True)
    return exporter


def external_references(html: str, *, links: bool = True) -> list[str]:
    """Addresses outside the file that an HTML text refers to.

    Parameters
    ----------
    html : str
        The HTML text.
    links : bool, default True
        Also list the targets of hyperlinks (``<a href=...>``), which a reader
        may follow but which are not loaded with the page.

    Returns
    -------
    list of str
        Every ``http://``, ``https://`` or protocol-relative ``//`` address in
        a ``src``/``href``/``action``/``poster``/``data``/``srcset``
        attribute, a CSS ``url()`` or an ``@import``, in order of appearance.
        Namespace names inside inline SVG (``xmlns="http://www.w3.org/2000/svg"``)
        are not fetched and are not listed.
    """
    if not isinstance(html, str):
        raise RiskvetError(problem("external_references(html)", allowed="HTML text (str)", received=type(html).__name__))
    found: list[tuple[int, str]] = []
    for tag in _TAG.finditer(html):
        if not links and tag.group(1).lower() == "a":
            continue
        found.extend((tag.start(), m.group(2)) for m in _ATTRIBUTE.finditer(tag.group(2)))
    found.extend((m.start(), m.group(1)) for m in _CSS.finditer(html))
    return [address for _, address in sorted(found)]


def render_html(
    notebook_path: str | Path,
    html_path: str | Path,
    *,
    show_code: bool = False,
    failure: str | None = None,
    page: PageHeader | None = None,
) -> Path:
    """Render an executed notebook as one self-contained HTML file.

    Parameters
    ----------
    notebook_path : path
        The executed notebook (``.ipynb``).
    html_path : path
        The HTML file to write; must not exist (record files are write-once).
    show_code : bool, default False
        Show the code cells too.  Off by default: the reviewer rendering
        shows markdown, tables and figures.
    failure : str, optional
        For a stage that failed: a sentence shown as a banner at the top of
        the page, so no reader takes its partial output for a result.
    page : PageHeader, optional
        The page's header (study, record, status, links to every page) and
        title.  Without one the title is made from the file name.

    Returns
    -------
    Path
        ``html_path``.

    Raises
    ------
    RecordError
        The notebook is missing or unreadable, the HTML file exists, or the
        rendering would load anything from the network (a hyperlink a reader
        may follow is allowed; see :func:`external_references`).

    Notes
    -----
    What the kernel wrote to its error stream and the tracebacks of a failed
    cell stay in the executed notebook; the page shows, in their place, one
    sentence (the error's message without paths or class names), so no file
    path or source line reaches a reader.
    """
    import nbformat

    notebook_path = Path(notebook_path)
    html_path = Path(html_path)
    if not notebook_path.is_file():
        raise RecordError(f"{notebook_path}: executed notebook not found; nothing to render")
    if html_path.exists():
        raise RecordError(f"{html_path}: already exists; a record file is never overwritten")
    try:
        notebook = nbformat.read(notebook_path, as_version=4)
    except Exception as exc:  # nbformat raises several unrelated types for damaged files
        raise RecordError(f"{notebook_path}: not a readable notebook ({type(exc).__name__}: {exc})") from None
    from .publish import scrub

    _for_readers(notebook)
    notebook.metadata["title"] = page.title if page is not None else notebook_path.stem.split("_", 1)[-1].replace("_", " ").capitalize()
    top = page_header_html(page) if page is not None else f"<style>{PAGE_STYLE}</style>"
    if failure:
        top += (
            f'<div class="rv-failure" role="alert">This stage failed. {html.escape(scrub(failure))} The output below is '
            "incomplete and is not a result; later stages did not run.</div>"
        )
    notebook.cells.insert(0, _html_cell(top))
    body, _ = _exporter(show_code=show_code).from_notebook_node(notebook)
    fetched = external_references(body, links=False)
    if fetched:
        raise RecordError(
            f"{notebook_path}: the rendering would load {len(fetched)} resource(s) from the network "
            f"(first: {fetched[0]!r}); a reviewer rendering must open offline"
        )
    html_path.parent.mkdir(parents=True, exist_ok=True)
    html_path.write_text(body, encoding="utf-8")
    return html_path


def _html_cell(content: str):
    """A code cell whose only output is ``content`` and whose input is never shown."""
    import nbformat

    cell = nbformat.v4.new_code_cell(source="", outputs=[nbformat.v4.new_output("display_data", data={"text/html": content})])
    cell.metadata["tags"] = ["riskvet-page"]
    return cell


def _for_readers(notebook) -> None:
    """Replace error-stream text and tracebacks by sentences a reader can use."""
    import nbformat

    from .publish import scrub

    for cell in notebook.cells:
        if cell.cell_type != "code":
            continue
        kept = []
        for output in cell.get("outputs", []):
            if output.get("output_type") == "stream" and output.get("name") == "stderr":
                continue
            if output.get("output_type") == "error":
                message = scrub(str(output.get("evalue", ""))).strip() or "the cell stopped with an error"
                sentence = f'<p class="rv-failure">This step stopped: {html.escape(message)}</p>'
                output = nbformat.v4.new_output("display_data", data={"text/html": sentence})
            kept.append(output)
        cell["outputs"] = kept

"""Reviewer renderings: one self-contained HTML file per executed notebook.

The rendering hides code cells by default (a reviewer reads tables, figures
and their interpretation), embeds every image as a data URI, and loads
nothing from the network: the script tags that would fetch require.js,
MathJax, Mermaid or the widget manager from a content delivery network are
left out, so the file opens the same offline, years later.  Mathematics in
markdown therefore shows as its TeX source.
"""

from __future__ import annotations

import re
from pathlib import Path

from ..errors import RecordError, RiskvetError, problem

__all__ = ["render_html", "external_references"]

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

    return HTMLExporter(
        template_name="lab",
        extra_loaders=[jinja2.DictLoader({"riskvet_offline.html.j2": _OFFLINE_TEMPLATE})],
        template_file="riskvet_offline.html.j2",
        exclude_input=not show_code,
        exclude_input_prompt=True,
        exclude_output_prompt=True,
        embed_images=True,
    )


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


def render_html(notebook_path: str | Path, html_path: str | Path, *, show_code: bool = False, failure: str | None = None) -> Path:
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
    notebook.metadata["title"] = notebook_path.stem
    if failure:
        banner = nbformat.v4.new_markdown_cell(
            "<div style=\"border:3px solid #D55E00;padding:0.6em 1em;font-weight:bold\">"
            f"THIS STAGE FAILED. {failure} The output below is incomplete and is not a result; "
            "later stages did not run.</div>"
        )
        notebook.cells.insert(0, banner)
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

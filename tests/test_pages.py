"""Record pages as readers meet them: in a real browser, and scanned for what must not show.

The browser is Debian's Chromium, driven headless by Playwright (PyPI) at
1280 and 390 pixels wide, for every page of the demo record and of a
binary-outcome record (``tests/conftest.py``).  For each page: no request
leaves the file, no console error, every image loads, nothing overflows the
page sideways, every link of the page header resolves.  Screenshots are
kept under ``tests/artifacts/`` (ignored by git) for a person to look at.

``.ci/run`` installs Chromium and Playwright and sets
``RISKVET_REQUIRE_BROWSER=1``, so there the browser tests fail instead of
skipping when the browser is missing.
"""

from __future__ import annotations

import json
import os
import re
import shutil
from pathlib import Path
from urllib.parse import unquote, urlparse

import pytest

from riskvet.reporting.publish import scan_text

ARTIFACTS = Path(__file__).parent / "artifacts" / "screenshots"
WIDTHS = (1280, 390)
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
# Flags for a closed network: without the background-networking ones Chromium keeps trying to reach
# its own services at start (common practice for headless Chromium in sandboxes and CI).
CHROMIUM_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--disable-default-apps",
]


def _records(chain, binary_chain):
    return {"ordered": chain.record_dir, "binary": binary_chain[1].record_dir}


@pytest.fixture(scope="module")
def browser():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _missing("the playwright package")
    if not Path(CHROMIUM).is_file():
        _missing(f"Chromium at {CHROMIUM}")
    with sync_playwright() as playwright:
        launched = playwright.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        yield launched
        launched.close()


def _missing(what: str):
    if os.environ.get("RISKVET_REQUIRE_BROWSER") == "1":
        pytest.fail(f"{what} is not installed; .ci/run installs it")
    pytest.skip(f"{what} is not installed (CI installs it)")


def _visit(browser, page_path: Path, width: int, shot: Path) -> dict:
    """Open one page at one width; return what went wrong."""
    context = browser.new_context(viewport={"width": width, "height": 900}, offline=True)
    requests, errors = [], []
    context.route("**/*", lambda route: route.continue_() if route.request.url.startswith(("file:", "data:"))
                  else (requests.append(route.request.url), route.abort()))
    page = context.new_page()
    page.on("console", lambda message: errors.append(message.text) if message.type == "error" else None)
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    page.goto(page_path.as_uri(), wait_until="load")
    images = page.evaluate(
        "() => Array.from(document.images).map(i => ({ok: i.complete && i.naturalWidth > 0, alt: i.alt}))"
    )
    overflow = page.evaluate(
        """() => {
          const width = document.documentElement.clientWidth;
          const wide = [];
          for (const el of document.querySelectorAll('body *')) {
            const box = el.getBoundingClientRect();
            if (box.width > 0 && box.right > width + 1 && getComputedStyle(el).position !== 'absolute'
                && !el.closest('.rv-table') && !el.closest('.jp-InputArea')) {
              wide.push(el.tagName + '.' + el.className + ': ' + (el.textContent || '').slice(0, 60));
            }
          }
          const tables = Array.from(document.querySelectorAll('.rv-table'))
            .filter(t => t.scrollWidth > t.clientWidth + 1).map(t => (t.textContent || '').slice(0, 60));
          return {page: document.documentElement.scrollWidth - width, elements: wide.slice(0, 5), tables};
        }"""
    )
    links = page.evaluate("() => Array.from(document.querySelectorAll('a[href]')).map(a => a.getAttribute('href'))")
    shot.parent.mkdir(parents=True, exist_ok=True)
    page.screenshot(path=str(shot), full_page=True)
    title = page.title()
    context.close()
    return {"requests": requests, "errors": errors, "images": images, "overflow": overflow, "links": links, "title": title}


def _broken_links(page_path: Path, links: list[str]) -> list[str]:
    broken = []
    for href in links:
        target = urlparse(href)
        if target.scheme in ("http", "https", "mailto"):
            continue
        file = page_path if not target.path else (page_path.parent / unquote(target.path)).resolve()
        if not file.is_file():
            broken.append(href)
        elif target.fragment and f'id="{target.fragment}"' not in file.read_text(encoding="utf-8"):
            broken.append(href)
    return broken


@pytest.mark.parametrize("kind", ["ordered", "binary"])
def test_every_page_reads_in_a_browser_at_both_widths(browser, chain, binary_chain, kind):
    record = _records(chain, binary_chain)[kind]
    pages = sorted((record / "html").glob("*.html"))
    assert (record / "html" / "index.html") in pages
    assert len(pages) >= 8  # seven stages and the index
    problems = []
    for page_path in pages:
        for width in WIDTHS:
            seen = _visit(browser, page_path, width, ARTIFACTS / kind / str(width) / f"{page_path.stem}.png")
            where = f"{page_path.name} at {width} px"
            if seen["requests"]:
                problems.append(f"{where}: requests leaving the file: {seen['requests'][:3]}")
            if seen["errors"]:
                problems.append(f"{where}: console errors: {seen['errors'][:3]}")
            bad = [i for i in seen["images"] if not i["ok"] or not i["alt"]]
            if bad:
                problems.append(f"{where}: {len(bad)} image(s) not loaded or without a text alternative")
            if seen["overflow"]["page"] > 1 or seen["overflow"]["elements"] or seen["overflow"]["tables"]:
                problems.append(f"{where}: wider than the screen: {seen['overflow']}")
            broken = _broken_links(page_path, seen["links"])
            if broken:
                problems.append(f"{where}: links that do not resolve: {broken}")
            if re.fullmatch(r"\d\d_\w+", seen["title"] or ""):
                problems.append(f"{where}: title is a file name: {seen['title']!r}")
    assert not problems, "\n".join(problems)


def test_every_page_header_links_every_stage_page(chain):
    record = chain.record_dir
    stage_pages = sorted(p.name for p in (record / "html").glob("[0-9][0-9]_*.html"))
    for page_path in (record / "html").glob("*.html"):
        text = page_path.read_text(encoding="utf-8")
        header = text[text.index('<header class="rv-header"'): text.index("</header>")]
        for name in stage_pages:
            assert f'href="{name}"' in header, (page_path.name, name)
        assert 'href="index.html"' in header
        assert chain.record_dir.name in header


# --- the scan: every page and every results file ------------------------------------------------------

def _visible_text(html_text: str) -> str:
    """Text a reader sees: without style, script, the equation block (whose names are defined there)."""
    from bs4 import BeautifulSoup

    soup = BeautifulSoup(html_text, "html.parser")
    for tag in soup(["style", "script", "head"]):
        tag.decompose()
    for tag in soup.select(".rv-equation"):
        tag.decompose()
    for tag in soup.select("pre code.language-latex, .jp-InputArea"):
        tag.decompose()
    return soup.get_text(" ")


def _internal_names(record: Path) -> list[str]:
    """Design-column and results-key names that are the program's, not the user's words."""
    model = json.loads((record / "models" / "model.json").read_text(encoding="utf-8"))
    names = set()
    for value in _strings(model.get("design", {})):
        if re.search(r"_nonlin\d|=|:", value) and " " not in value:
            names.add(value)
    return sorted(names)


def _strings(value):
    if isinstance(value, str):
        yield value
    elif isinstance(value, dict):
        for v in value.values():
            yield from _strings(v)
    elif isinstance(value, list):
        for v in value:
            yield from _strings(v)


# Codes of the program that must never reach a page: results keys of measures by cut, cut numbers,
# thresholds written with a bar.
_CODES = re.compile(r"\b\w+_cut\d+\b|\bcut \d+\b(?! to\b)|(?<![|\w])\w+\|\w+(?![|\w])|\bY >= ")


@pytest.mark.parametrize("kind", ["ordered", "binary"])
def test_pages_show_no_index_column_missing_word_code_path_or_scientific_notation(chain, binary_chain, kind):
    record = _records(chain, binary_chain)[kind]
    internal = _internal_names(record)
    problems = []
    for page_path in sorted((record / "html").glob("*.html")):
        raw = page_path.read_text(encoding="utf-8")
        text = _visible_text(raw)
        for what, context in scan_text(text, internal_names=internal):
            problems.append(f"{page_path.name}: {what}: …{context}…")
        for m in _CODES.finditer(text):
            problems.append(f"{page_path.name}: internal code: …{text[max(0, m.start() - 30): m.end() + 30]}…")
        if re.search(r"<th[^>]*>\s*</th>", raw) or 'class="dataframe"' in raw:
            problems.append(f"{page_path.name}: a raw table (index column or empty header) reached the page")
    assert not problems, "\n".join(problems[:40])


@pytest.mark.parametrize("kind", ["ordered", "binary"])
def test_results_files_hold_no_path_class_name_missing_word_or_scientific_notation(chain, binary_chain, kind):
    record = _records(chain, binary_chain)[kind]
    problems = []
    for path in sorted((record / "results").glob("*.json")):
        raw = path.read_text(encoding="utf-8")
        if re.search(r"(?<![\w\".])\d+(?:\.\d+)?[eE][-+]?\d+(?![\w\".])", raw):
            problems.append(f"{path.name}: a number in scientific notation")
        for value in _strings(json.loads(raw)):
            for what, context in scan_text(value):
                if what != "scientific notation" or not re.fullmatch(r"[\w.=:+-]+", value):
                    problems.append(f"{path.name}: {what}: …{context}…")
    assert not problems, "\n".join(problems[:40])

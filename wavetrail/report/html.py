"""Self-contained HTML from an executed report notebook.

The page is built by us around nbconvert's ``basic`` cell fragments: our own
stylesheet inlined, images only as ``data:`` URIs, no script at all, and a
Content-Security-Policy that forbids the browser to fetch anything. The page
therefore opens offline and cannot leak a request when it is opened.
"""

from __future__ import annotations

import html as _html
import re
from importlib import resources

import nbformat

#: the browser may load nothing but inline styles and embedded images
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"

_REMOTE = re.compile(
    r"""(?:\b(?:src|href|action|poster|data)\s*=\s*["']?\s*(?!data:|#)[a-z][a-z0-9+.-]*:"""
    r"""|@import|url\(\s*["']?\s*(?!data:)[a-z][a-z0-9+.-]*:|\bsrcset\s*=)""",
    re.IGNORECASE,
)
_H2 = re.compile(r"<h2(?:\s[^>]*)?>(.*?)</h2>", re.DOTALL)
_TAG = re.compile(r"<[^>]+>")


def stylesheet() -> str:
    """The report's stylesheet (``wavetrail/report/report.css``)."""
    return resources.files("wavetrail.report").joinpath("report.css").read_text(encoding="utf-8")


def remote_references(page: str) -> list[str]:
    """Every place in ``page`` that would make a browser load something by URL.

    Data URIs and in-page anchors (``#...``) are fine; anything with a scheme
    (``https:``, ``file:``, ...) in ``src``/``href``/``url()``, any ``@import`` and any
    ``srcset`` is reported. An empty list means the page is self-contained.
    """
    return [m.group(0) for m in _REMOTE.finditer(page)]


def _slug(text: str, used: set[str]) -> str:
    base = re.sub(r"[^a-z0-9]+", "-", _TAG.sub("", text).lower()).strip("-") or "section"
    slug, k = base, 2
    while slug in used:
        slug, k = f"{base}-{k}", k + 1
    used.add(slug)
    return slug


def _number_sections(body: str) -> tuple[str, list[tuple[str, str]]]:
    used: set[str] = set()
    toc: list[tuple[str, str]] = []

    def repl(m: re.Match) -> str:
        inner = m.group(1).strip()
        slug = _slug(inner, used)
        toc.append((slug, inner))
        return f'<h2 id="{slug}"><span class="wt-secno">{len(toc)}</span>{inner}</h2>'

    return _H2.sub(repl, body), toc


#: cells with this tag are shown in the notebook but left out of the HTML page
NOTEBOOK_ONLY = "notebook-only"


def _drop_notebook_only():
    from nbconvert.preprocessors import TagRemovePreprocessor

    return TagRemovePreprocessor(remove_cell_tags={NOTEBOOK_ONLY}, enabled=True)


def notebook_to_html(nb: nbformat.NotebookNode, *, title: str, subtitle: str = "", footer: str = "") -> str:
    """Render an executed notebook as one self-contained HTML page.

    Code is left out (it stays in the notebook); outputs and text cells are kept.
    Level-2 headings become numbered sections with a contents list.

    Parameters
    ----------
    nb
        The executed (and normalised) notebook.
    title, subtitle
        Shown at the top of the page.
    footer
        A line of text at the bottom (e.g. the wavetrail version).
    """
    from nbconvert import HTMLExporter

    exporter = HTMLExporter(
        template_name="basic",
        exclude_input=True,
        exclude_input_prompt=True,
        exclude_output_prompt=True,
        exclude_anchor_links=True,
        embed_images=True,
    )
    exporter.register_preprocessor(_drop_notebook_only(), enabled=True)
    body, _ = exporter.from_notebook_node(nb)
    body = re.sub(r' id="cell-id=[^"]*"', "", body)
    body, toc = _number_sections(body)
    items = "".join(f'<li><a href="#{slug}">{text}</a></li>' for slug, text in toc)
    nav = f'<nav class="wt-contents" aria-label="Contents"><strong>Contents</strong><ol>{items}</ol></nav>' if toc else ""
    esc = _html.escape
    sub = f"<p>{esc(subtitle)}</p>" if subtitle else ""
    foot = f'<footer class="wt-foot">{esc(footer)}</footer>' if footer else ""
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{esc(title)}</title>\n<style>\n{stylesheet()}</style>\n</head>\n<body>\n"
        f'<header class="wt-masthead"><div class="wt-page"><h1>{esc(title)}</h1>{sub}</div></header>\n'
        f'<main class="wt-page">\n{nav}\n{body}\n{foot}\n</main>\n</body>\n</html>\n'
    )

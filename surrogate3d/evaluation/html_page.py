"""One self-contained HTML page: inline style, figures as data URIs, no external files."""

import base64
import html

_STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; color: #222; max-width: 1250px;
       margin: 2em auto; padding: 0 1.5em; line-height: 1.45; }
h1 { font-size: 1.6em; border-bottom: 2px solid #1d5fa6; padding-bottom: .2em; }
h2 { font-size: 1.25em; margin-top: 2em; color: #1d5fa6; }
nav a { margin-right: 1em; font-size: .9em; }
table { border-collapse: collapse; font-size: .82em; margin: 1em 0; }
th, td { padding: .25em .6em; border-bottom: 1px solid #ddd; text-align: left; }
th { background: #f2f5f9; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 1em 0; }
figure img { max-width: 100%; height: auto; }
figcaption { font-size: .88em; color: #555; max-width: 900px; }
pre { background: #f6f6f6; padding: .8em; font-size: .82em; overflow-x: auto; }
.note { background: #fff5e0; padding: .4em .8em; }
footer { margin-top: 3em; font-size: .8em; color: #777; }
"""


def _anchor(title):
    return "".join(c if c.isalnum() else "-" for c in title.lower()).strip("-")


def figure_html(png, caption):
    """A figure of the page: the PNG embedded as a data URI, with its caption.

    Parameters
    ----------
    png : bytes
    caption : str
        Plain text; its first 80 characters are the image's alt text.

    Returns
    -------
    str
    """
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img alt="{html.escape(caption[:80])}" src="data:image/png;base64,{data}">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>")


def render_page(title, sections, footer=""):
    """The page: a title, a table of contents, and the sections.

    Parameters
    ----------
    title : str
    sections : list of (str, str)
        Section heading (plain text) and body (HTML).
    footer : str
        Plain text.

    Returns
    -------
    str
    """
    nav = " ".join(f'<a href="#{_anchor(h)}">{html.escape(h)}</a>' for h, _ in sections)
    body = "\n".join(f'<section id="{_anchor(h)}"><h2>{html.escape(h)}</h2>\n{content}\n</section>'
                     for h, content in sections)
    return (f'<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n<title>{html.escape(title)}</title>\n'
            f"<style>{_STYLE}</style>\n</head>\n<body>\n<h1>{html.escape(title)}</h1>\n<nav>{nav}</nav>\n{body}\n"
            f"<footer>{html.escape(footer)}</footer>\n</body>\n</html>\n")

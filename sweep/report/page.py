"""One static HTML page that shows a study: figures, tables, the sweep definition and provenance.

The page needs no server and no network: images and table files are relative links in the same
folder. A small inline script reports, once the page has loaded, whether every image decoded
(``<p id="image-check" data-ok="true">``), so a headless browser can check the page.
"""

from __future__ import annotations

import html
from pathlib import Path

_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 72rem; margin: 2rem auto; padding: 0 1rem;
       color: #222; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.25rem; margin-top: 2.2rem; border-bottom: 1px solid #ccc; }
figure { margin: 1.5rem 0; } figure img { max-width: 100%; }
figcaption { font-size: 0.9rem; color: #444; }
table { border-collapse: collapse; margin: 1rem 0; font-size: 0.85rem; }
caption { text-align: left; font-weight: 600; padding-bottom: 0.3rem; }
th, td { padding: 0.15rem 0.6rem; text-align: right; border-bottom: 1px solid #e4e4e4; }
th { border-bottom: 1px solid #888; }
pre { background: #f6f6f6; padding: 0.8rem; overflow-x: auto; font-size: 0.8rem; }
.note { font-size: 0.85rem; color: #555; margin: 0.2rem 0; }
dl { display: grid; grid-template-columns: max-content auto; gap: 0.2rem 1rem; }
dt { font-weight: 600; } dd { margin: 0; font-family: monospace; }
"""

_CHECK_SCRIPT = """
window.addEventListener("load", function () {
  var images = Array.prototype.slice.call(document.images);
  var broken = images.filter(function (img) { return !(img.complete && img.naturalWidth > 0); });
  var out = document.getElementById("image-check");
  out.setAttribute("data-ok", broken.length === 0 && images.length > 0 ? "true" : "false");
  out.textContent = (images.length - broken.length) + " of " + images.length + " images loaded";
});
"""


def write_page(out_dir, title: str, provenance: dict, notes: list, figures: list, tables: list,
               spec_text: str = "") -> Path:
    """Write ``index.html`` into ``out_dir`` and return its path.

    Parameters
    ----------
    out_dir : path
        Report folder (figures and table files already written there).
    title : str
        Page title.
    provenance : dict
        Labels and values shown under "Provenance" (spec hash, version, time, rows...).
    notes : list of str
        Lines shown at the top (missing rows, the irreducible share, skipped sections).
    figures : list of sweep.report.figures.FigureFile
        Figures, in page order.
    tables : list of (sweep.report.tables.Table, dict)
        Each table with its files by format (``{"Markdown": path, "LaTeX": path, "CSV": path}``).
    spec_text : str
        The sweep definition as written (TOML).
    """
    out_dir = Path(out_dir)
    esc = html.escape
    parts = [f"<h1>{esc(title)}</h1>",
             "<p id=\"image-check\" class=\"note\" data-ok=\"pending\">checking images</p>"]
    parts += [f"<p class=\"note\">{esc(note)}</p>" for note in notes]
    if figures:
        parts.append("<h2>Figures</h2>")
    for fig in figures:
        parts.append(
            f"<figure id=\"{esc(fig.name)}\"><img src=\"{esc(fig.png.name)}\" alt=\"{esc(fig.title)}\">"
            f"<figcaption><b>{esc(fig.title)}.</b> {esc(fig.caption)} "
            f"(<a href=\"{esc(fig.pdf.name)}\">PDF</a>)</figcaption></figure>")
    if tables:
        parts.append("<h2>Tables</h2>")
    for table, files in tables:
        links = " ".join(f"<a href=\"{esc(Path(path).name)}\">{esc(kind)}</a>"
                         for kind, path in files.items())
        parts.append(f"{table.html()}<p class=\"note\">Download: {links}</p>")
    parts.append("<h2>Provenance</h2><dl>")
    parts += [f"<dt>{esc(str(k))}</dt><dd>{esc(str(v))}</dd>" for k, v in provenance.items()]
    parts.append("</dl>")
    if spec_text:
        parts.append(f"<h2>Sweep definition</h2><pre>{esc(spec_text)}</pre>")
    page = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{_STYLE}</style></head><body>\n"
            + "\n".join(parts)
            + f"\n<script>{_CHECK_SCRIPT}</script>\n</body></html>\n")
    path = out_dir / "index.html"
    path.write_text(page, encoding="utf-8")
    return path

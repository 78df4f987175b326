"""HTML pieces shared by the reach pages and the run index: page shell, tables, images, colour key.

Pages are self-contained: figures are embedded as base64 PNGs, styles inline, no scripts.
"""
from __future__ import annotations

import base64
import html
import io

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg

CSS = """
body{font-family:system-ui,Segoe UI,Helvetica,Arial,sans-serif;margin:1.5em auto;max-width:1150px;color:#222;
padding:0 1em}
h1{margin-bottom:.2em} h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.8em}
h3{margin:1.2em 0 .3em}
.caution{border:3px solid #b3541e;background:#fff4e5;padding:.8em 1em;font-weight:600;margin:1em 0}
nav{font-size:.9em;margin:.6em 0} nav a{margin-right:1em}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}
th,td{border:1px solid #ccc;padding:.2em .5em;text-align:right;vertical-align:top} th{background:#f0f0f0}
td.text,th.text,.facts td,.facts th,.glossary td,.glossary th,.reaches td,.reaches th{text-align:left}
.facts th{background:#f7f7f7;font-weight:600;white-space:nowrap}
th[colspan]{text-align:center;background:#e4ecf5} img{max-width:100%;display:block;margin:.4em 0}
figure{margin:1em 0} figcaption{font-size:.9em;color:#333}
.wide{overflow-x:auto} .key span.swatch{display:inline-block;width:1.8em;height:.7em;margin:0 .3em 0 1em}
.flagged{color:#b00020;font-weight:600} .noted{color:#6a3d9a;font-weight:600} .failed{color:#b00020;font-weight:600} .note{font-size:.9em;color:#444}
"""

#: colour of the n-th event, the same on every figure and in the colour key
EVENT_COLOURS = ("#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd", "#8c564b", "#e377c2", "#17becf", "#bcbd22")
FLAG_COLOUR = "#d0021b"
#: sections whose flags are notes only (how the section was built, what it is): not for review
NOTE_COLOUR = "#7b4fb3"


def event_colour(i: int) -> str:
    return EVENT_COLOURS[i % len(EVENT_COLOURS)]


def esc(value) -> str:
    return html.escape(str(value))


def figure_png(fig, dpi: int = 90) -> bytes:
    """PNG bytes of a matplotlib Figure drawn with the Agg canvas (no pyplot state)."""
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, pil_kwargs={"compress_level": 3})   # 6 (default) is 2x slower
    return buf.getvalue()


def img(fig, alt: str, dpi: int = 90) -> str:
    data = base64.b64encode(figure_png(fig, dpi)).decode("ascii")
    return f'<img alt="{esc(alt)}" src="data:image/png;base64,{data}">'


def figure(fig, alt: str, caption: str, ident: str | None = None, cls: str | None = None, dpi: int = 90) -> str:
    """<figure> with the embedded image and a caption (``caption`` is HTML)."""
    attrs = (f' id="{esc(ident)}"' if ident else "") + (f' class="{esc(cls)}"' if cls else "")
    return f"<figure{attrs}>{img(fig, alt, dpi)}<figcaption>{caption}</figcaption></figure>"


def _fmt(digits: int):
    def one(v):
        if isinstance(v, (float, np.floating)):
            return "" if not np.isfinite(v) else f"{v:.{digits}f}"
        return v
    return one


def table(df: pd.DataFrame, digits: int = 3, cls: str | None = None, escape: bool = True) -> str:
    """A frame as an HTML table; floats with ``digits`` decimals unless already formatted as text."""
    return df.to_html(index=False, na_rep="", float_format=_fmt(digits), border=0, classes=cls, escape=escape)


def facts_table(items, cls: str = "facts") -> str:
    """Two-column table of (item, value) pairs, item as a row header."""
    rows = "".join(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>" for k, v in items)
    return f'<table class="{cls}">{rows}</table>'


def colour_key(events) -> str:
    spans = "".join(f'<span class="swatch" style="background:{event_colour(i)}"></span>{esc(e)}'
                    for i, e in enumerate(events))
    return f'<p class="key">Events: {spans}</p>'


def page(title: str, body: list[str]) -> str:
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{CSS}</style></head><body>\n" + "\n".join(body)
            + "\n</body></html>\n")

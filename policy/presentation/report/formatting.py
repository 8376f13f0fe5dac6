"""Formatting for the page: digits per kind of figure, colours, JSON for a script element,
tables and inline SVG figures."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Mapping

import numpy as np
import pandas as pd
from markupsafe import Markup



#: digits after the point of each kind of figure, on the page and in the JavaScript alike
DIGITS = {"share": 1, "rate": 2, "cost": 0}


# ----------------------------------------------------------------------------------------------
# Formatting (presentation only)
# ----------------------------------------------------------------------------------------------
def fmt_pct(value: float, digits: int = 1) -> str:
    """A fraction as a percentage, e.g. 0.1234 -> '12.3%'; missing as an en dash."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    return f"{100.0 * float(value):.{digits}f}%"


def fmt_num(value: float, digits: int = 0) -> str:
    """A number with thousands separators, e.g. 12345.6 -> '12,346'; missing as an en dash."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    text = f"{float(value):,.{digits}f}"
    # a negative number that rounds to zero shows as zero, as on the page's script
    return text[1:] if text.startswith("-") and not any(ch in "123456789" for ch in text) else text


def fmt_factor(value: float, significant: int = 6) -> str:
    """A bound, factor or reached value as written by people: '40,000', '0.15', '1.5' (never '4e+04')."""
    if value is None or not math.isfinite(float(value)):
        return "\u2013"
    v = float(f"{float(value):.{significant}g}")
    if v == int(v) and abs(v) < 1e15:
        return f"{int(v):,}"
    return f"{v:,.{max(0, significant - 1 - int(math.floor(math.log10(abs(v)))))}f}".rstrip("0").rstrip(".")


def input_value(value: float) -> str:
    """A number as an HTML number input's value: the shortest round-trip text, '1000' not '1000.0'."""
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


def level_colours(n_levels: int) -> list[str]:
    """Colours of decision levels 0..n-1, lenient to harsh: the figures' (:func:`policy.presentation.plots.level_colours`)."""
    from policy.presentation.plots import level_colours as figure_colours  # noqa: F401

    return figure_colours(n_levels)


def tint(colour: str, keep: float = 0.35) -> str:
    """A light tint of a colour (``keep`` of it over white), behind dark text at AA contrast."""
    from matplotlib.colors import to_hex, to_rgb

    r, g, b = to_rgb(colour)
    return to_hex((1 - keep + keep * r, 1 - keep + keep * g, 1 - keep + keep * b))


def risk_level_colours(n: int) -> list[str]:
    """Colours of risk levels 0..n-1 (safe to not preventable) from matplotlib's ``cividis``,
    a sequential map readable with colour-vision deficiency (Nunez, Anderton and Renslow 2018)."""
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps["cividis"]
    return [to_hex(cmap(1.0 - i / max(n - 1, 1) * 0.9)) for i in range(n)]


def json_for_script(obj: Any) -> Markup:
    """JSON text that is safe inside ``<script type="application/json">``.

    ``<``, ``>`` and ``&`` become ``\\u003c``, ``\\u003e``, ``\\u0026`` (so no ``</script>`` or
    ``<!--`` can appear), and U+2028/U+2029 become ``\\u2028``/``\\u2029``. ``JSON.parse``
    reads the escapes back as the original characters. Non-finite numbers are an error.
    """
    text = json.dumps(obj, separators=(",", ":"), allow_nan=False, ensure_ascii=False)
    for char, escape in (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e"),
                         ("\u2028", "\\u2028"), ("\u2029", "\\u2029")):
        text = text.replace(char, escape)
    return Markup(text)


@dataclass(frozen=True)
class TableView:
    """A table as the page shows it: caption, header and already formatted cells.

    ``numeric`` marks right-aligned columns; ``row_header`` the leading columns that name a row
    (rendered as ``<th scope="row">``).
    """

    caption: str
    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[bool, ...] = ()
    row_header: int = 1
    note: str = ""

    @classmethod
    def from_frame(cls, frame: pd.DataFrame, caption: str, formats: Mapping[str, Callable[[Any], str]] | None = None,
                   row_header: int = 1, note: str = "", rename: Mapping[str, str] | None = None) -> "TableView":
        """Format a DataFrame: each column by ``formats[column]`` (default ``str``)."""
        formats = dict(formats or {})
        cols = list(frame.columns)
        rows = tuple(
            tuple(formats.get(c, _plain)(v) for c, v in zip(cols, values))
            for values in frame.itertuples(index=False, name=None)
        )
        numeric = tuple(c in formats for c in cols)
        names = tuple((rename or {}).get(c, str(c)) for c in cols)
        return cls(caption, names, rows, numeric, row_header, note)


def _plain(value: Any) -> str:
    if isinstance(value, float) and not math.isfinite(value):
        return "\u2013"
    return str(value)


def fmt_interval(value: float, lo: float, hi: float, fmt: Callable[[float], str]) -> str:
    """A figure with its interval in brackets, e.g. '12.3% (10.1% to 14.0%)'; without one where missing."""
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return fmt(value)
    return f"{fmt(value)} ({fmt(lo)} to {fmt(hi)})"


def inline_svg(write: Callable[[Path], None], key: str, label: str) -> Markup:
    """A figure, written as SVG by ``write(path)`` (a writer of :func:`policy.presentation.plots.figure_files`),
    as an element to place inside the page.

    Its ids get the prefix ``key`` (figures share glyph and clip-path ids otherwise), comments,
    metadata and namespace declarations go, and it scales to the page's width. Text drawn as
    paths carries no markup; ``label`` (escaped) names the figure for screen readers.
    """
    import re
    import tempfile
    from html import escape

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "figure.svg"
        write(path)
        text = path.read_text(encoding="utf-8")
    text = text[text.index("<svg"):]
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{key}-{m.group(1)}"', text)
    text = re.sub(r'((?:xlink:)?href)="#([^"]+)"', lambda m: f'{m.group(1)}="#{key}-{m.group(2)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{key}-{m.group(1)})", text)
    root = re.match(r"<svg\b[^>]*>", text).group(0)
    clean = re.sub(r'\s(?:width|height|version|xmlns(?::\w+)?)="[^"]*"', "", root)
    clean = clean[:-1] + f' width="100%" role="img" aria-label="{escape(label, quote=True)}">'
    return Markup(clean + text[len(root):])

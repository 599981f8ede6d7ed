"""Charts: matplotlib drawings of an analysis, imported lazily (the core never imports them).

May import: the packages above ``blendq.report``, and ``blendq.report.document``.
"""

from __future__ import annotations

from functools import lru_cache

#: drawn in place of a character the chart font has no glyph for (an emoji in a zone name):
#: an empty square, as the font would draw, but without a warning per character and chart
MISSING_GLYPH = "\u25a1"


@lru_cache(maxsize=8)
def _charmap(path: str) -> frozenset[int]:
    from matplotlib.font_manager import get_font

    return frozenset(get_font(path).get_charmap())


def _drawable(content: str, covered: frozenset[int]) -> str:
    if content.isascii() or all(c.isspace() or ord(c) in covered for c in content):
        return content
    return "".join(c if c.isspace() or ord(c) in covered else MISSING_GLYPH for c in content)


def _escaped(label, covered: frozenset[int]) -> str:
    """A tick label (made at drawing time, when mathematics is read): drawable, dollars
    escaped."""
    return _drawable(str(label), covered).replace("$", r"\$")


def plain_text(fig):
    """Make every text of ``fig`` plain: user text (zone, well and scenario names) is drawn as
    written, never read as mathematics between dollar signs, and a character the chart's font
    cannot draw is replaced by :data:`MISSING_GLYPH`. Tick labels given as text (zone names on
    an axis) are made when the figure is drawn; their dollar signs are escaped. Returns ``fig``.
    """
    from matplotlib.font_manager import FontProperties, findfont
    from matplotlib.text import Text
    from matplotlib.ticker import FixedFormatter, FuncFormatter

    for text in fig.findobj(Text):
        text.set_parse_math(False)
        text.set_text(_drawable(text.get_text(), _charmap(findfont(text.get_fontproperties()))))
    covered = _charmap(findfont(FontProperties()))
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            formatter = axis.get_major_formatter()
            if isinstance(formatter, FixedFormatter):
                formatter.seq = [_escaped(label, covered) for label in formatter.seq]
            elif isinstance(formatter, FuncFormatter) and not hasattr(formatter, "_plain"):
                formatter._plain = formatter.func  # labels given as a list (set_yticks)
                formatter.func = lambda x, pos, f=formatter._plain: _escaped(f(x, pos), covered)
    return fig

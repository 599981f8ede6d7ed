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


def plain_text(fig):
    """Make every text of ``fig`` plain: user text (zone, well and scenario names) is drawn as
    written, never read as mathematics between dollar signs, and a character the chart's font
    cannot draw is replaced by :data:`MISSING_GLYPH`. Returns ``fig``."""
    from matplotlib.font_manager import findfont
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        text.set_parse_math(False)
        content = text.get_text()
        if content.isascii():
            continue
        covered = _charmap(findfont(text.get_fontproperties()))
        if any(ord(c) not in covered for c in content if not c.isspace()):
            text.set_text("".join(c if c.isspace() or ord(c) in covered else MISSING_GLYPH
                                  for c in content))
    return fig

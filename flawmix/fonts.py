"""Fonts for figures whose labels hold characters the default font lacks (Chinese, Japanese,
Korean origin names): use an installed font that has them, else draw quietly without them.
"""
from __future__ import annotations

import contextlib
import functools
import warnings

# Families known to carry CJK glyphs, in order of preference (whichever is installed).
CJK_FAMILIES = ("Noto Sans CJK JP", "Noto Sans CJK SC", "Noto Sans CJK TC", "Noto Sans CJK KR", "Noto Sans SC",
                "Noto Sans JP", "Source Han Sans", "WenQuanYi Zen Hei", "WenQuanYi Micro Hei", "Droid Sans Fallback",
                "IPAGothic", "IPAexGothic", "Unifont", "AR PL UMing CN", "Microsoft YaHei", "SimHei", "MS Gothic",
                "Hiragino Sans", "PingFang SC", "Apple SD Gothic Neo", "Malgun Gothic")


@functools.lru_cache(maxsize=1)
def wide_font() -> str | None:
    """The first installed family of :data:`CJK_FAMILIES`, or None."""
    from matplotlib import font_manager

    installed = {f.name for f in font_manager.fontManager.ttflist}
    return next((name for name in CJK_FAMILIES if name in installed), None)


def _needs_wide(text: str) -> bool:
    return any(ord(ch) >= 0x2E80 for ch in text)    # CJK radicals onwards (Hangul, kana, ideographs...)


def prepare(figure) -> None:
    """Give every text of ``figure`` that needs it a CJK font as fallback, when one is installed."""
    from matplotlib.text import Text

    font = wide_font()
    if font is None:
        return
    for text in figure.findobj(Text):
        if _needs_wide(text.get_text()):
            family = list(text.get_fontfamily())
            if font not in family:
                text.set_fontfamily([*family, font])


@contextlib.contextmanager
def quiet_glyphs():
    """Silence matplotlib's missing-glyph warnings while drawing: the figure is still right,
    the characters show as boxes, and the report names every label in its tables."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .*missing from", category=UserWarning)
        warnings.filterwarnings("ignore", message=r".*missing from (current )?font", category=UserWarning)
        yield


def save(figure, target, **options) -> None:
    """``figure.savefig(target, **options)`` with CJK fallback fonts and no glyph warnings."""
    prepare(figure)
    with quiet_glyphs():
        figure.savefig(target, **options)

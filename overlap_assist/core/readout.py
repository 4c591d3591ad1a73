"""One rounding for every figure shown to the user (CLI, panel, report, contact sheet).

Each kind of figure has one number of decimals, so the same flight reads the same everywhere
("floaty: 0.45 g" in the CLI, the sidebar, the report and the contact sheet).
"""
import math

GRAVITY_RATIO_DIGITS = 2
"""Implied gravity over scene gravity: 0.45 g (two decimals: 0.8 and 1.25 are the verdict limits)."""
LOAD_DIGITS = 1
"""Load factor in g: 5.0 g."""
FRAME_DIGITS = 1
"""Event frames at sub-frame precision: 26.9."""


def fixed(x, digits: int) -> str:
    """Fixed decimals, never '-0.0'; '—' for a missing or non-finite value."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "—"
    if not math.isfinite(v):
        return "—"
    text = f"{v:.{digits}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text


def ratio_g(x) -> str:
    """'0.45 g': a gravity ratio."""
    return f"{fixed(x, GRAVITY_RATIO_DIGITS)} g"


def load_g(x) -> str:
    """'5.0 g': a load factor."""
    return f"{fixed(x, LOAD_DIGITS)} g"


def frame(x) -> str:
    """'26.9': an event frame."""
    return fixed(x, FRAME_DIGITS)


def count(n: int, noun: str) -> str:
    """``n`` and the noun, singular for one ("1 chain", "2 chains"; regular plurals only)."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def sentence(text) -> str:
    """A phrase shown on its own line (panel, report) as a sentence: capital first letter.
    The JSON and the command line keep the phrase as made, for use after a colon."""
    text = str(text or "")
    return text[:1].upper() + text[1:]

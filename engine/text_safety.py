"""Text from the user's file shown so that it cannot deceive: direction controls and control
characters made visible.

A label is data, and data can hold characters that change how the text around them is shown:
Unicode's bidirectional embedding, override and isolate controls (U+202A–U+202E, U+2066–U+2069)
reverse what follows them, so one U+202E in a group label makes "100.0%" display as "%0.001";
and control characters such as ESC start terminal escape sequences that recolour a shell, move
the cursor or rewrite the title, and crash the SVG renderer of the report's figures. Hazel shows
each such character as a visible code, ``[U+202E]``, wherever a label reaches a person (the
report, the pages, the manuscript sentences, the figures, the command line), and says so once
in the data warnings. The data themselves are never changed: filters and recipes still match the
label as written in the file.
"""

from __future__ import annotations

import re
from collections.abc import Iterable

import pandas as pd

BIDI_CONTROLS = frozenset(chr(c) for c in (*range(0x202A, 0x202F), *range(0x2066, 0x206A)))
# Characters that print as nothing, so "A" and "A" + U+200B look the same: the soft hyphen,
# zero-width spaces and joiners, direction marks, word joiners and invisible operators, the byte
# order mark, Hangul fillers, line and paragraph separators, and the tag characters.
INVISIBLE = (
    "\u00ad\u034f\u061c\u115f\u1160\u17b4\u17b5\u180b-\u180f\u200b-\u200f\u2028\u2029"
    "\u2060-\u2064\u206a-\u206f\u3164\ufeff\uffa0\ufff9-\ufffb\U000e0000-\U000e007f"
)
# C0 controls except tab and newline, DEL, C1 controls; the direction controls above; and the
# invisible characters.
HIDDEN_CHARACTERS = f"[\x00-\x08\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069{INVISIBLE}]"  # regex
_HIDDEN = re.compile(HIDDEN_CHARACTERS)
_HIDDEN_IN_LINE = re.compile(f"[\x00-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069{INVISIBLE}]")


def _code(match: re.Match) -> str:
    return f"[U+{ord(match.group()):04X}]"  # U+E0041 keeps its five digits


def visible_text(value: object, *, one_line: bool = False) -> str:
    """``str(value)`` with every direction control and control character shown as ``[U+XXXX]``
    (tab and newline are kept unless ``one_line``)."""
    text = str(value)
    pattern = _HIDDEN_IN_LINE if one_line else _HIDDEN
    return pattern.sub(_code, text) if pattern.search(text) else text


def visible_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with ``visible_text`` applied to the cells and names of its text columns (the
    same object when nothing needs changing: most tables have no such character)."""
    changed = {}
    for column in frame.columns:
        series = frame[column]
        if pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series):
            continue
        if series.astype("string").str.contains(HIDDEN_CHARACTERS, na=False).any():
            changed[column] = series.map(visible_text, na_action="ignore")
    names = [c for c in frame.columns if isinstance(c, str) and has_hidden_characters(c)]
    if not changed and not names:
        return frame
    out = frame.copy()
    for column, values in changed.items():
        out[column] = values
    return out.rename(columns={c: visible_text(c) for c in names})


def has_hidden_characters(value: object) -> bool:
    """True when ``visible_text`` would change the text (outside tabs and newlines)."""
    return bool(_HIDDEN.search(str(value)))


def hidden_characters_warning(labels: Iterable[object], where: str) -> str | None:
    """One warning sentence when any label holds direction controls or control characters."""
    found = sorted({visible_text(v) for v in labels if v is not None and has_hidden_characters(v)})
    if not found:
        return None
    shown = ", ".join(repr(v) for v in found[:5]) + (
        f" and {len(found) - 5} more" if len(found) > 5 else ""
    )
    return (
        f"{len(found)} label(s) in {where} hold direction controls or control characters "
        "(or invisible ones), which can reorder or hide the text around them or make two "
        f"labels look alike; they are shown as codes: {shown}. Check the file's export."
    )

"""Direction controls and control characters in labels are shown as codes (issue 10, item 14)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from engine.survival.summary import numbers_at_risk
from engine.text_safety import BIDI_CONTROLS, visible_frame, visible_text

HIDDEN = [*sorted(BIDI_CONTROLS), "\x1b", "\x00", "\x7f", "\x9b", "\r"]


@pytest.mark.parametrize("character", HIDDEN)
def test_each_hidden_character_becomes_a_visible_code(character):
    shown = visible_text(f"100.0%{character}B")
    assert character not in shown
    assert shown == f"100.0%[U+{ord(character):04X}]B"


def test_the_ranges_named_in_the_issue_are_all_covered():
    named = {chr(c) for c in [*range(0x202A, 0x202F), *range(0x2066, 0x206A)]}
    assert named == BIDI_CONTROLS


@given(st.text())
def test_visible_text_leaves_nothing_hidden_and_is_idempotent(text):
    shown = visible_text(text)
    assert not any(_hidden(c) for c in shown)
    assert visible_text(shown) == shown
    if not any(_hidden(c) for c in text):
        assert shown == text  # ordinary text is untouched


# Characters that print as nothing, written out by code point: soft hyphen, combining grapheme
# joiner, Arabic letter mark, Hangul fillers, Khmer inherent vowels, Mongolian variation
# selectors and vowel separator, zero-width space/non-joiner/joiner, direction marks, line and
# paragraph separators, word joiner and invisible operators, deprecated format characters,
# byte-order mark, interlinear annotation controls, tag characters.
_INVISIBLE_CODES = {
    0x00AD, 0x034F, 0x061C, 0x115F, 0x1160, 0x17B4, 0x17B5, *range(0x180B, 0x1810),
    *range(0x200B, 0x2010), 0x2028, 0x2029, *range(0x2060, 0x2065), *range(0x206A, 0x2070),
    0x3164, 0xFEFF, 0xFFA0, *range(0xFFF9, 0xFFFC), *range(0xE0000, 0xE0080),
}  # fmt: skip


def _hidden(character: str) -> bool:
    """The definition, written out: C0 but tab/newline, DEL, C1, the direction controls, the
    characters that print as nothing."""
    code = ord(character)
    return (
        (code < 32 and character not in "\t\n")
        or 0x7F <= code <= 0x9F
        or (character in BIDI_CONTROLS)
        or code in _INVISIBLE_CODES
    )


def test_visible_frame_changes_text_columns_only_and_keeps_the_original():
    frame = pd.DataFrame({"group": ["a\u202e", None], "n": [1, 2], "ok\x1b": ["x", "y"]})
    shown = visible_frame(frame)
    assert shown["group"].tolist() == ["a[U+202E]", None]
    assert list(shown.columns) == ["group", "n", "ok[U+001B]"]
    assert frame["group"][0] == "a\u202e"  # the data are not changed
    plain = pd.DataFrame({"group": ["a"], "n": [1]})
    assert visible_frame(plain) is plain


def test_prepare_warns_once_about_labels_with_hidden_characters():
    frame = pd.DataFrame({"t": [1.0, 2.0, 3.0, 4.0], "e": [1, 0, 1, 1], "g": ["\u202eA", "B"] * 2})
    report = prepare(frame, Roles(time="t", event="e", group="g")).report
    hidden = [w for w in report.warnings if "direction controls" in w]
    assert len(hidden) == 1 and "[U+202E]A" in hidden[0] and "\u202e" not in hidden[0]


def test_numbers_at_risk_by_group_leave_rows_without_a_group_out_of_every_group():
    """Issue 10 item 11: the report's at-risk table used to refuse a group with missing values."""
    time = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    group = pd.Categorical(["a", "a", None, "b", None])
    table = numbers_at_risk(time, np.ones(5), group, ticks=(0.0, 2.5)).to_frame()
    assert table["at_risk"].tolist() == [2, 0, 1, 1]  # a: 2 then 0; b: 1 then 1
    pooled = numbers_at_risk(time, np.ones(5), None, ticks=(0.0, 2.5)).to_frame()
    assert pooled["at_risk"].tolist() == [5, 3]

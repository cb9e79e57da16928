"""Showing text from outside (unit serials, lot codes, bench names, file contents) inert.

Names are stored verbatim; wherever one is shown (the dashboard, plain text, error messages, the HTML
report) it goes through `inert`, so a control character cannot drive the terminal and shows as what
it is: `\\x1b` for ESC, `\\x07` for BEL, `\\u202e` for a right-to-left override. Markup characters are
left alone here: the dashboard puts names in `rich.text.Text` (never parsed as markup) and the report
escapes HTML after this.
"""

from __future__ import annotations

import re

# C0 and C1 controls and DEL, and the invisible format characters that reorder or hide text
_UNSAFE = re.compile(r"[\x00-\x1f\x7f-\x9f\u200b-\u200f\u202a-\u202e\u2060-\u2069\ufeff]")


def _visible(m: re.Match) -> str:
    c = m.group()
    return f"\\x{ord(c):02x}" if ord(c) < 0x100 else f"\\u{ord(c):04x}"


def inert(text: object) -> str:
    """`text` as a string with every control or invisible formatting character written out."""
    return _UNSAFE.sub(_visible, str(text))

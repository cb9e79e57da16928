"""Notes a reading command prints to stderr beside its output."""

from __future__ import annotations

import sys


def say_readonly(store) -> None:
    """Say how a store that could not be opened the usual way is read (read-only, snapshot)."""
    note = store.readonly_note
    if note:
        print(f"benchlog: note: {note}", file=sys.stderr)

"""Helpers for the headless explorer tests: message counting on widgets."""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[2] / "src" / "loopcraft" / "examples"


@contextmanager
def count_messages(widgets: Iterable) -> Iterator[Counter]:
    """Count the comm messages each widget sends (wraps its ``_send``), keyed by ``id``."""
    counts: Counter = Counter()
    originals = []
    for w in widgets:
        orig = w._send
        key = id(w)

        def spy(msg, buffers=None, _orig=orig, _id=key):
            if msg.get("method") == "update":
                counts[_id] += 1
            return _orig(msg, buffers=buffers)

        originals.append((w, orig))
        w._send = spy
    try:
        yield counts
    finally:
        for w, orig in originals:
            w._send = orig


@pytest.fixture
def loop_path() -> Path:
    return EXAMPLES / "bus48_loop.json"

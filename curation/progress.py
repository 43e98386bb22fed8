"""The progress callback that every long library call accepts."""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["Progress"]

#: Called as ``progress(done, total)`` while a long step runs (rows stored,
#: trees read, traits diagnosed); the command line draws it as a bar.
Progress = Callable[[int, int], None]

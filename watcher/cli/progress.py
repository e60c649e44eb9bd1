"""A one-line progress bar on stderr for reading large runs; silent unless the stream is a TTY."""

from __future__ import annotations

import sys
import time
from typing import TYPE_CHECKING, TextIO

if TYPE_CHECKING:
    from collections.abc import Callable

_WIDTH = 30
_REDRAW_S = 0.1  # at most ten redraws a second: a redraw costs a syscall, the reader is hot


class ProgressBar:
    """``bar(done, total)`` redraws ``label [#####.....]  42 %`` in place; ``close()`` clears it.

    The bar appears only after ``delay_s`` so that small files, which finish at once, never
    flash one. Off a TTY (logs, pipes, CI) it draws nothing.

    Args:
        label: shown before the bar (usually the file name).
        stream: where to draw; default ``sys.stderr``.
        enabled: force on or off; default: on when ``stream`` is a TTY.
        delay_s: seconds before the first draw.
        clock: monotonic clock, seconds (tests pass their own).
    """

    def __init__(
        self,
        label: str,
        *,
        stream: TextIO | None = None,
        enabled: bool | None = None,
        delay_s: float = 0.5,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._stream = stream if stream is not None else sys.stderr
        if enabled is None:
            enabled = _is_tty(self._stream)
        self.enabled = enabled
        self._label = label if len(label) <= 40 else "..." + label[-37:]
        self._clock = clock
        self._start = clock()
        self._delay_s = delay_s
        self._last_draw = -1.0
        self._drawn = False

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled or total <= 0:
            return
        now = self._clock()
        if now - self._start < self._delay_s or now - self._last_draw < _REDRAW_S:
            return
        self._last_draw = now
        fraction = min(max(done / total, 0.0), 1.0)
        filled = round(fraction * _WIDTH)
        bar = "#" * filled + "." * (_WIDTH - filled)
        self._stream.write(f"\r{self._label} [{bar}] {fraction * 100:3.0f} %")
        self._stream.flush()
        self._drawn = True

    def close(self) -> None:
        """Erase the bar (if one was drawn) so the next output starts on a clean line."""
        if self._drawn:
            self._stream.write("\r\x1b[2K")
            self._stream.flush()
            self._drawn = False

    def __enter__(self) -> ProgressBar:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


def _is_tty(stream: TextIO) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):  # closed or file-like without isatty
        return False

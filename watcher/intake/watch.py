"""Folder watching: a watchdog handler that turns file events into hints on a bounded queue.

Events are hints, never the truth: a hint only schedules a readiness check, and anything lost
(queue full, inotify overflow) is repaired by a full reconcile scan (``catchup.py``). The handler
runs on watchdog's dispatcher thread, so it only filters the name and enqueues.
"""

from __future__ import annotations

import logging
import queue
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from watchdog.events import (
    DirCreatedEvent,
    DirMovedEvent,
    FileClosedEvent,
    FileCreatedEvent,
    FileModifiedEvent,
    FileMovedEvent,
    FileSystemEvent,
    FileSystemEventHandler,
)
from watchdog.observers import Observer
from watchdog.observers.polling import PollingObserver

from watcher.intake.folderwalk import is_ignored, is_run_path

if TYPE_CHECKING:
    from watchdog.observers.api import BaseObserver

    from watcher.config import Watch


@dataclass(frozen=True, slots=True)
class Hint:
    """Something may have changed at ``path``; ``is_dir``: a folder appeared (scan it)."""

    path: Path
    is_dir: bool = False


class RescanFlag:
    """Set when hints were lost; the main loop clears it when it starts a full scan."""

    def __init__(self) -> None:
        self._event = threading.Event()
        self.reason = ""

    def set(self, reason: str) -> None:
        self.reason = reason
        self._event.set()

    def take(self) -> str | None:
        """The reason if set (and clear it), else None."""
        if not self._event.is_set():
            return None
        self._event.clear()
        return self.reason or "requested"


class HintHandler(FileSystemEventHandler):
    """Enqueues a Hint for created, modified, closed and moved-in (destination) run files."""

    def __init__(
        self, roots: tuple[Path, ...], watch: Watch, hints: queue.Queue[Hint], rescan: RescanFlag
    ) -> None:
        self._roots = roots
        self._patterns = watch.patterns
        self._ignore = watch.ignore
        self._hints = hints
        self._rescan = rescan

    def _root_of(self, path: Path) -> Path:
        for root in self._roots:
            if path.is_relative_to(root):
                return root
        return path.parent

    def _offer(self, hint: Hint) -> None:
        try:
            self._hints.put_nowait(hint)
        except queue.Full:
            # Never block the dispatcher thread: drop the hint and let a full scan find the file.
            self._rescan.set("hint queue full")

    def dispatch(self, event: FileSystemEvent) -> None:
        if isinstance(event, FileMovedEvent | DirMovedEvent):
            raw: Any = event.dest_path
        elif isinstance(
            event, FileCreatedEvent | FileModifiedEvent | FileClosedEvent | DirCreatedEvent
        ):
            raw = event.src_path
        else:
            return  # deletions, attribute changes and opens tell nothing about readiness
        path = Path(raw.decode() if isinstance(raw, bytes) else raw)
        if event.is_directory:
            if not is_ignored(path.name, self._ignore):
                self._offer(Hint(path, is_dir=True))
            return
        if is_run_path(path, self._root_of(path), self._patterns, self._ignore):
            self._offer(Hint(path))


class OverflowWatch(logging.Handler):
    """Listens on the ``watchdog`` logger: an inotify overflow means events were lost."""

    def __init__(self, rescan: RescanFlag) -> None:
        super().__init__(level=logging.WARNING)
        self._rescan = rescan

    def emit(self, record: logging.LogRecord) -> None:
        if "overflow" in record.getMessage().lower():
            self._rescan.set("inotify overflow")


def make_observer(watch: Watch) -> BaseObserver:
    """inotify by default; the polling observer (every ``poll_interval_s``) for network shares."""
    if watch.polling:
        return PollingObserver(timeout=watch.poll_interval_s)
    observer: BaseObserver = Observer()
    return observer


def start_watching(
    watch: Watch, hints: queue.Queue[Hint], rescan: RescanFlag
) -> tuple[BaseObserver, OverflowWatch]:
    """Schedule every folder and start the observer thread; returns it and the overflow listener."""
    roots = tuple(Path(f).resolve() for f in watch.folders)
    handler = HintHandler(roots, watch, hints, rescan)
    observer = make_observer(watch)
    for root in roots:
        observer.schedule(handler, str(root), recursive=watch.recursive)
    overflow = OverflowWatch(rescan)
    logging.getLogger("watchdog").addHandler(overflow)
    observer.start()
    return observer, overflow


def stop_watching(observer: BaseObserver, overflow: OverflowWatch, timeout_s: float = 5.0) -> None:
    logging.getLogger("watchdog").removeHandler(overflow)
    observer.stop()
    observer.join(timeout_s)

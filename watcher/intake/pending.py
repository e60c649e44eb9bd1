"""The files seen but not yet settled: hints and folder scans in, settled or given-up files out.

The daemon's main loop owns one ``Settler``: it passes on the watcher's hints (``take_hint``),
asks for full scans (``scan``) and, every pass, for the files that became ready (``due``). The
readiness rules themselves are the pure ``watcher.intake.readiness``; this module adds the stat
calls, the format completeness check and the bookkeeping of pending files. It never writes the
job table: the caller says which identities are already known and queues what comes out.
"""

from __future__ import annotations

import stat
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import structlog

from watcher.intake import folderwalk, vendor, watch
from watcher.intake import readiness as settle

if TYPE_CHECKING:
    from watcher.config import Watch

log = structlog.get_logger("watcher.intake.pending")

IsKnown = Callable[[Path, settle.FileStat], bool]


@dataclass(frozen=True, slots=True)
class Settled:
    """A file to queue: whole, or given up with ``incomplete`` saying why (judged unreadable)."""

    path: Path
    stat: settle.FileStat
    incomplete: str | None = None


class Settler:
    """Pending files and their settle checks, under the current ``watch`` settings."""

    def __init__(self, watch_settings: Watch, vendor: tuple[str, ...] = ()) -> None:
        self.watch = watch_settings  # replaced on reload; pending files keep their state
        self.vendor = vendor  # convert.patterns: vendor runs (files or folders), also on reload
        self.pending: dict[Path, settle.Pending] = {}
        self._links_skipped: set[Path] = set()  # each reported once, not on every scan

    def walk(self, known: set[tuple[str, int, int]], now_s: float) -> tuple[int, int]:
        """Look through every watched folder; returns (run files seen, newly pending).

        Args:
            known: the (path, size, mtime_ns) identities already in the job table.
        """
        w = self.watch
        seen = folderwalk.walk(
            w.folders, w.patterns, w.ignore, recursive=w.recursive, vendor=self.vendor
        )
        added = 0
        for item in folderwalk.unknown(seen, known):
            if item.path not in self.pending and not self._link_out(item.path):
                self.pending[item.path] = settle.new_pending(item.path, now_s, w.settle_s)
                added += 1
        return len(seen), added

    def waiting(self) -> list[dict[str, object]]:
        """The files still settling, for ``status``: name, size, since when, and why they wait.

        ``last_change_s`` is the file's own last write (its mtime), so the age ``status`` shows
        is how long the file has been unchanged, across daemon restarts too."""
        out: list[dict[str, object]] = []
        for path, p in sorted(self.pending.items()):
            out.append(
                {
                    "file": str(path),
                    "size": None if p.last_stat is None else p.last_stat.size,
                    "first_seen_s": round(p.first_seen_s, 3),
                    "last_change_s": round(p.last_change_s, 3),
                    "why": f"incomplete: {p.reason}" if p.reason else "settling",
                }
            )
        return out

    def take_hint(self, hint: watch.Hint, now_s: float) -> None:
        """Start settling what a watcher event names (a folder moved in: every run file in it)."""
        if not hint.is_dir:
            self._note(hint.path, now_s)
            return
        w = self.watch
        if vendor.inside_vendor_run(hint.path, self._roots(), self.vendor, w.ignore):
            return  # a sub-folder of a vendor run folder: part of that run
        if vendor.is_vendor_name(hint.path.name, self.vendor, w.ignore):
            self._note(hint.path, now_s)  # a vendor run folder: one run, settled as a tree
            return
        # A folder moved in carries its files without an event per file: scan it.
        walked = folderwalk.walk(
            [hint.path], w.patterns, w.ignore, recursive=w.recursive, vendor=self.vendor
        )
        for item in walked:
            self._note(item.path, now_s)

    def due(self, now_s: float, is_known: IsKnown) -> list[Settled]:
        """Look at every pending file whose next check is due; returns those to queue.

        Args:
            is_known: whether a settled identity is already in the job table (then it is
                forgotten, not queued again).
        """
        ready: list[Settled] = []
        for path, pending in list(self.pending.items()):
            if pending.next_check_s > now_s:
                continue
            is_vendor = vendor.is_vendor_name(path.name, self.vendor, self.watch.ignore)
            stat = vendor.tree_stat(path) if is_vendor else _stat(path)
            decision, nxt = self._decide(pending, stat, now_s, None)
            if decision is settle.Decision.READY and stat is not None:
                if is_known(path, stat):
                    del self.pending[path]
                    continue
                # A vendor run has no format to check here: its converter reads it.
                why = None if is_vendor else _completeness(path)
                if why is not None:
                    decision, nxt = self._decide(pending, stat, now_s, why)
            if decision is settle.Decision.READY and stat is not None:
                del self.pending[path]
                log.info(
                    "run.settled",
                    file=str(path),
                    size=stat.size,
                    waited_s=round(now_s - pending.first_seen_s, 3),
                )
                ready.append(Settled(path, stat))
            elif decision is settle.Decision.GIVE_UP and stat is not None:
                del self.pending[path]
                growing = nxt.last_stat is not None and nxt.last_stat != pending.last_stat
                # stalled: how long unchanged; still being written: how long it was waited for
                waited_s = now_s - (nxt.first_seen_s if growing else nxt.last_change_s)
                text = settle.incomplete_message(nxt.reason or "not whole", waited_s)
                log.warning("run.incomplete", file=str(path), reason=text)
                ready.append(Settled(path, stat, text))
            elif decision is settle.Decision.GONE:
                del self.pending[path]
            else:
                self.pending[path] = nxt
        return ready

    def _decide(
        self,
        pending: settle.Pending,
        stat: settle.FileStat | None,
        now_s: float,
        incomplete_reason: str | None,
    ) -> tuple[settle.Decision, settle.Pending]:
        return settle.step(
            pending,
            stat,
            now_s,
            settle_s=self.watch.settle_s,
            max_wait_s=self.watch.max_wait_s,
            incomplete_reason=incomplete_reason,
            stall_s=self.watch.stall_s,
        )

    def _roots(self) -> list[Path]:
        """The watched folders as given and as resolved (watchdog reports resolved paths)."""
        out: list[Path] = []
        for folder in self.watch.folders:
            out.append(Path(folder))
            try:
                out.append(Path(folder).resolve())
            except OSError:
                continue
        return out

    def _link_out(self, path: Path) -> bool:
        """Whether ``path`` is a link out of the watched folders that must not be read.

        Such a link lets whoever writes the export folder make the daemon read any file it can
        (a secrets file, /etc/shadow) and put what it finds into alerts: skipped, and said once.
        """
        w = self.watch
        if w.follow_symlinks_out or not folderwalk.leads_outside(path, w.folders):
            return False
        if path not in self._links_skipped:
            self._links_skipped.add(path)
            log.warning(
                "run.link_skipped",
                file=str(path),
                reason="a symbolic link to a file outside the watched folders is not measured "
                "(watch.follow_symlinks_out is false)",
            )
        return True

    def _note(self, path: Path, now_s: float) -> None:
        if vendor.inside_vendor_run(path, self._roots(), self.vendor, self.watch.ignore):
            return  # a file or folder inside a vendor run folder is part of that run
        if path not in self.pending and not self._link_out(path):
            self.pending[path] = settle.new_pending(path, now_s, self.watch.settle_s)
            log.info("run.detected", file=str(path))


def _stat(path: Path) -> settle.FileStat | None:
    """Size and mtime of a regular file; None when it is gone or is no regular file.

    Opening a FIFO or a device named like a run would block the main loop (nobody writes to
    it), so anything but a regular file is treated as not there.
    """
    try:
        st = path.stat()
    except OSError:
        return None
    if not stat.S_ISREG(st.st_mode):
        return None
    return settle.FileStat(st.st_size, st.st_mtime_ns)


def _completeness(path: Path) -> str | None:
    # Imported here: the format checks are only needed once a file has settled.
    from watcher.intake.formats import completeness

    try:
        # Bounded reads only (head, tail, index offset): this runs on the main loop, which must
        # keep pinging the watchdog. The SHA-1, the MGF block count and the gzip stream are
        # proven once, by the measuring child, before any metric leaves it.
        reason: str | None = completeness(path, deep=False)
    except OSError as exc:
        return f"cannot be read ({exc.strerror})"
    return reason

"""The daemon's wiring and process life: watcher, settler, worker, signals, reload, sd_notify.

``ionwarden run -c CONFIG`` calls ``main(args)``; the demo drives a ``Daemon`` in-process with
``start()``, ``wait_idle()`` and ``close()``. Threads: watchdog's observer (hints only), one worker
(measures one run at a time in a child process) and the main loop here, which hands hints and
scans to the settler (``watcher.intake.pending``), queues the files it settles as jobs, checks
the heartbeat, ticks the notifier and talks to systemd. Only the main loop pings the systemd
watchdog, and only while the observer lives and the worker makes progress.
"""

from __future__ import annotations

import contextlib
import json
import logging
import os
import queue
import signal
import sqlite3
import threading
import time
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import structlog

from watcher import config as config_mod
from watcher.config import Config, Watch, state_dir_of
from watcher.daemon import convert, lock, logs, norun_alert, preflight, retention, sdnotify
from watcher.daemon.endpoint import start_endpoint, stop_endpoint
from watcher.daemon.pipeline import JobOutcome, Pipeline, time_limit_s
from watcher.errors import (
    ConfigError,
    IonwardenError,
    StoreCorruptError,
    StoreError,
    StoreTooNewError,
)
from watcher.intake import vendor, watch
from watcher.intake.pending import Settled, Settler
from watcher.measure.parallel import worker_count
from watcher.notify.notifier import Notifier
from watcher.records import DaemonEvent, shown
from watcher.store import db, jobs

if TYPE_CHECKING:
    import argparse
    from collections.abc import Callable
    from types import FrameType

    from watcher.central.publish import Publisher
    from watcher.intake.readiness import FileStat
    from watcher.view.metrics import MetricsServer

log = structlog.get_logger("watcher.daemon")

TICK_S = 0.1
STATUS_EVERY_S = 2.0
WAITING_KEY = "intake.waiting"  # JSON list of the files still settling (``Settler.waiting``)
NOTIFY_TICK_EVERY_S = 1.0
CHECKPOINT_EVERY_S = 3600.0
PRUNE_EVERY_S = 86400.0  # store retention is in days: once at start-up, then daily
STATE_CHECK_EVERY_S = 2.0  # two stat calls: cheap enough to notice a deleted store within seconds
# A store that refuses writes (a full disk) is tried again with a doubling wait: soon enough to
# resume minutes after space returns, rare enough not to fill the journal meanwhile.
STORE_RETRY_FIRST_S = 1.0
STORE_RETRY_MAX_S = 60.0
STORE_PROBE_KEY = "store_probe_s"  # a real write: an empty transaction proves nothing


class Daemon:
    """One daemon instance: ``start()``, then ``run()`` (blocking) or ``step()`` from a loop."""

    def __init__(self, config: Config, *, clock: Callable[[], float] = time.time) -> None:
        self.config = config
        self.clock = clock
        self.state_dir = state_dir_of(config)
        self.hints: queue.Queue[watch.Hint] = queue.Queue(maxsize=max(1, config.limits.queue_max))
        self.rescan = watch.RescanFlag()
        self.settler = Settler(config.watch, vendor=config.convert.patterns)
        self.stop_event = threading.Event()
        self.wake_worker = threading.Event()
        self._stop_requested = threading.Event()
        self._reload_requested = threading.Event()
        self._observer: Any = None
        self._overflow: watch.OverflowWatch | None = None
        self._worker: threading.Thread | None = None
        self._busy_since: float | None = None
        self._busy_limit_s = 0.0
        self._last_scan = 0.0
        self._last_status = 0.0
        self._waiting_published: str | None = None
        self._last_notify_tick = 0.0
        self._last_checkpoint = 0.0
        self._last_prune_s: float | None = None
        self._last_arrival_s = 0.0
        self._state_ids: tuple[tuple[int, int], ...] | None = None
        self._last_state_check = 0.0
        self.state_lost: str | None = None
        self.lock_fd: int | None = None
        self.conn: sqlite3.Connection | None = None
        # Why the state store refuses writes, while it does (set by any thread, cleared only by
        # the worker's probe write): shown in STATUS=, reported once per outage.
        self.store_fault: str | None = None
        self._fault_lock = threading.Lock()
        self.notifier: Notifier | None = None
        self.pipeline: Pipeline | None = None
        self.publisher: Publisher | None = None
        self._endpoint: MetricsServer | None = None

    def _notifier(self) -> Notifier:
        if self.notifier is None:
            raise StoreError("the daemon is not started (call start() first)")
        return self.notifier

    def _conn(self) -> sqlite3.Connection:
        if self.conn is None:
            raise StoreError("the daemon is not started (call start() first)")
        return self.conn

    # -- life -----------------------------------------------------------------------------------

    def start(self) -> None:
        """Open the store, resume interrupted work, start watching and queue the first scan.

        Raises:
            StoreError: state folder unusable (network filesystem, permissions).
            DeliveryError: an alert channel was refused.
        """
        now_s = self.clock()
        self.conn = db.connect(self.state_dir, daemon=True)
        try:
            worker_conn = db.connect(self.state_dir, daemon=True)
        except BaseException:
            self.conn.close()  # start() may be tried again (``start_when_writable``)
            self.conn = None
            raise
        for folder in self.config.watch.folders:
            if not Path(folder).is_dir():
                raise StoreError(f"watch folder {folder} does not exist or is not a folder")
            if not self.config.watch.polling and db.is_network_fs(db.filesystem_type(folder)):
                log.warning(
                    "watch.network_folder",
                    folder=str(folder),
                    advice="inotify sees nothing on network shares; set watch.polling: true",
                )
        notifier = self.notifier = self._make_notifier(self.config)
        # A store that refuses writes at start-up (a full disk after a restart) is reported and
        # retried by the worker like one that fails later: exiting would only loop under systemd.
        start_fault: sqlite3.Error | None = None
        requeued = 0
        try:
            with db.write(self.conn):
                requeued = jobs.requeue_interrupted(self.conn, now_s)
                notifier.record_event(self.conn, DaemonEvent.STARTED, now_s)
        except sqlite3.Error as exc:
            start_fault = exc
        notifier.write_event(DaemonEvent.STARTED)
        notifier.start_delivery()
        self._last_arrival_s = max(now_s, jobs.last_arrival_s(self.conn) or 0.0)
        self._state_ids = self._state_identity()
        self._last_state_check = time.monotonic()
        self.pipeline = Pipeline(self.config, worker_conn, notifier, self.stop_event, self.clock)
        self._start_publisher(self.config)
        try:
            self.pipeline.resume_health_lines()
            self._prune_store(now_s)
        except sqlite3.Error as exc:
            start_fault = start_fault or exc
        if start_fault is not None:
            self.store_failed(start_fault)
        self._observer, self._overflow = watch.start_watching(
            _watched(self.config), self.hints, self.rescan
        )
        self._full_scan("start-up")
        self._worker = threading.Thread(target=self._work, name="ionwarden-worker", daemon=True)
        self._worker.start()
        self._endpoint = start_endpoint(self.config, self.state_dir)
        log.info(
            "daemon.started",
            state_dir=str(self.state_dir),
            folders=[str(f) for f in self.config.watch.folders],
            polling=self.config.watch.polling,
            requeued=requeued,
        )
        sdnotify.notify("READY=1")
        log.info("daemon.ready")

    def start_when_writable(self) -> bool:
        """``start()``, waiting while the store cannot even be opened for want of space (a full
        disk after a restart: SQLite cannot create its -shm/-wal files); False when asked to stop
        meanwhile. Exiting instead would burn systemd's start limit within seconds and leave
        nothing watching; so it tells systemd READY=1 with the reason in STATUS=, keeps pinging
        the watchdog, sends one alert directly, and retries with back-off."""
        retry_s = STORE_RETRY_FIRST_S
        reported = False
        watchdog_every_s = sdnotify.watchdog_interval_s()
        while True:
            try:
                self.start()
            except StoreError as exc:
                if not db.refuses_writes(exc.__cause__):
                    raise
                if not reported:
                    reported = True
                    self.store_failed(sqlite3.OperationalError(str(exc.__cause__)), at_start=True)
                sdnotify.notify("READY=1")
                sdnotify.notify(f"STATUS=state store not writable ({exc.__cause__}); waiting")
            else:
                if reported:  # the worker's probe write clears it: the outbox says "again"
                    with self._fault_lock:
                        self.store_fault = self.store_fault or "could not open it at start-up"
                return True
            deadline = time.monotonic() + retry_s
            while time.monotonic() < deadline:
                if self._stop_requested.wait(min(watchdog_every_s or 1.0, 1.0)):
                    sdnotify.notify("STOPPING=1")
                    return False
                if watchdog_every_s is not None:
                    sdnotify.notify("WATCHDOG=1")  # alive and waiting: a restart frees nothing
            retry_s = min(2 * retry_s, STORE_RETRY_MAX_S)

    def run(self) -> int:
        """The main loop until SIGTERM/SIGINT (``request_stop``); returns the exit code."""
        watchdog_every_s = sdnotify.watchdog_interval_s()
        last_ping = 0.0
        while not self._stop_requested.is_set():
            try:
                self.step()
            except sqlite3.Error as exc:
                # A full disk must not end the main loop: it keeps watching and pinging, files
                # not queued now are found by the rescan the recovery asks for.
                self.store_failed(exc)
                if self.clock() - self._last_status >= STATUS_EVERY_S:
                    self._last_status = self.clock()
                    self._status()
            due = watchdog_every_s is not None and time.monotonic() - last_ping >= watchdog_every_s
            if due and self.is_healthy():
                sdnotify.notify("WATCHDOG=1")
                last_ping = time.monotonic()
            self._stop_requested.wait(TICK_S)
        self.close()
        if self.state_lost is not None:
            raise StoreError(self.state_lost)  # exit 3: systemd restarts into a fresh store
        return 0

    def request_stop(self) -> None:
        self._stop_requested.set()

    def request_reload(self) -> None:
        self._reload_requested.set()

    def close(self) -> None:
        """Stop cleanly: STOPPING=1, stop watching, re-queue the run in flight, checkpoint WAL."""
        sdnotify.notify("STOPPING=1")
        log.info("daemon.stopping")
        if self._observer is not None and self._overflow is not None:
            watch.stop_watching(self._observer, self._overflow)
        stop_endpoint(self._endpoint)
        self._endpoint = None
        self.stop_event.set()
        self.wake_worker.set()
        if self._worker is not None:
            self._worker.join(10.0)
        if self.pipeline is not None:
            self.pipeline.close()
        self._stop_publisher()
        if self.notifier is not None and self.conn is not None and self.state_lost is None:
            try:
                with db.write(self.conn):
                    self.notifier.record_event(self.conn, DaemonEvent.STOPPED, self.clock())
            except sqlite3.Error as exc:  # the store refuses writes: stop all the same
                log.warning("store.unwritable", error=str(exc), during="stop")
            self.notifier.write_event(DaemonEvent.STOPPED)
            self.notifier.stop_delivery(2.0)
        for conn in (self.conn, self.pipeline.conn if self.pipeline else None):
            if conn is not None:
                # Another connection may still be reading: the next start folds the WAL in.
                with contextlib.suppress(sqlite3.Error):
                    db.checkpoint(conn)
                conn.close()
        self.conn = None
        log.info("daemon.stopped")

    # -- main loop --------------------------------------------------------------------------------

    def step(self) -> None:
        """One pass of the main loop: reload, scans, hints, settling, no-run alert, notifier."""
        self._conn()  # raises before start()
        if self._state_gone():
            return
        now_s = self.clock()
        if self._reload_requested.is_set():
            self._reload_requested.clear()
            self._reload()
        reason = self.rescan.take()
        if reason is not None:
            self._full_scan(reason)
        elif now_s - self._last_scan >= self.config.watch.rescan_interval_s:
            self._full_scan("interval")
        self._drain_hints(now_s)
        self._settle_due(now_s)
        self._check_norun(now_s)
        if self.notifier is not None and now_s - self._last_notify_tick >= NOTIFY_TICK_EVERY_S:
            self._last_notify_tick = now_s
            self.notifier.tick(self._conn(), now_s)
        if now_s - self._last_status >= STATUS_EVERY_S:
            self._last_status = now_s
            self._status()
        if self._last_prune_s is None or now_s - self._last_prune_s >= PRUNE_EVERY_S:
            self._prune_store(now_s)
        if now_s - self._last_checkpoint >= CHECKPOINT_EVERY_S and self._busy_since is None:
            self._last_checkpoint = now_s
            db.checkpoint(self._conn())

    def _state_identity(self) -> tuple[tuple[int, int], ...] | None:
        """(device, inode) of the state folder and its database; None when either is gone."""
        try:
            return tuple(
                (st.st_dev, st.st_ino)
                for st in (os.stat(self.state_dir), os.stat(self.state_dir / db.DB_NAME))
            )
        except OSError:
            return None

    def _state_gone(self) -> bool:
        """Whether the store was deleted or replaced under us; then stop rather than go on.

        An open SQLite file that was unlinked still takes writes, into a file nobody will ever
        read again: every judgement from then on would be lost without a word.
        """
        if self.state_lost is not None:
            return True
        since_s = time.monotonic() - self._last_state_check
        if self._state_ids is None or since_s < STATE_CHECK_EVERY_S:
            return False
        self._last_state_check = time.monotonic()
        now_ids = self._state_identity()
        if now_ids == self._state_ids:
            return False
        what = "was deleted" if now_ids is None else "was replaced by another folder or file"
        self.state_lost = (
            f"state folder {self.state_dir} {what} while the daemon was running; stopping so "
            "that no judgement is written into a store nobody can read (a restart starts a new "
            "store there; restore a backup first to keep the history)"
        )
        log.error("state.lost", state_dir=str(self.state_dir), error=self.state_lost)
        self.request_stop()
        return True

    def is_healthy(self) -> bool:
        """Observer thread alive, and the worker idle or within its run's time limit.

        A store that refuses writes does not stop the pings: a restart frees no disk space, and
        the daemon must keep watching (``store_fault`` is in STATUS= instead)."""
        if self._observer is None or not self._observer.is_alive():
            return False
        if self._worker is None or not self._worker.is_alive():
            return False
        busy = self._busy_since
        return busy is None or time.monotonic() - busy <= self._busy_limit_s + 60.0

    def wait_idle(self, timeout_s: float) -> bool:
        """For in-process use (demo, tests): step until nothing is pending, queued or measuring."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            self.step()
            counts = jobs.counts(self._conn())
            if (
                not self.settler.pending
                and self.hints.empty()
                and counts["queued"] == 0
                and counts["measuring"] == 0
                and self._busy_since is None
            ):
                return True
            time.sleep(TICK_S)
        return False

    def _prune_store(self, now_s: float) -> None:
        """Job rows past the health log's retention whose file is gone (``retention``)."""
        self._last_prune_s = now_s
        keep_days = self.config.health_log.keep_days
        pruned = retention.prune_jobs(self._conn(), self.config.watch.folders, keep_days, now_s)
        if pruned is None:
            log.warning("store.prune_skipped", reason="a watched folder is missing or empty")
        elif pruned:
            log.info("store.pruned", jobs=pruned, keep_days=keep_days)
        removed = convert.prune(self.state_dir, keep_days, now_s)
        if removed:
            log.info("converted.pruned", folders=removed, keep_days=keep_days)

    def _full_scan(self, reason: str) -> None:
        now_s = self.clock()
        files, added = self.settler.walk(jobs.known_identities(self._conn()), now_s)
        self._last_scan = now_s
        log.info("scan.completed", reason=reason, files=files, new=added)

    def _drain_hints(self, now_s: float) -> None:
        while True:
            try:
                hint = self.hints.get_nowait()
            except queue.Empty:
                return
            self.settler.take_hint(hint, now_s)

    def _settle_due(self, now_s: float) -> None:
        ready = self.settler.due(now_s, self._is_known)
        if ready:
            self._enqueue(ready, now_s)

    def _is_known(self, path: Path, stat: FileStat) -> bool:
        return jobs.known(self._conn(), path, stat.size, stat.mtime_ns)

    def _enqueue(self, ready: list[Settled], now_s: float) -> None:
        added: list[tuple[int, Path]] = []
        resumed = False
        with db.write(self._conn()):
            for item in ready:
                job_id = jobs.enqueue(
                    self._conn(),
                    item.path,
                    item.stat.size,
                    item.stat.mtime_ns,
                    now_s,
                    incomplete=item.incomplete,
                )
                if job_id is not None:
                    added.append((job_id, item.path))
            if added:
                self._last_arrival_s = now_s
                resumed = norun_alert.resume(self._conn(), self._notifier(), now_s)
        for job_id, path in added:
            log.info("run.queued", file=shown(path), job_id=job_id)
        if resumed:
            norun_alert.announce_resumed(self._notifier())
        if added:
            self.wake_worker.set()

    def _check_norun(self, now_s: float) -> None:
        norun_alert.check(self._conn(), self._notifier(), self.config, now_s, self._last_arrival_s)

    def _status(self) -> None:
        self._publish_waiting()
        counts = jobs.counts(self._conn())
        last = self.pipeline.last_file if self.pipeline else None
        fault = self.store_fault
        sdnotify.notify(
            ("STATUS=" if fault is None else f"STATUS=state store not writable ({fault}); ")
            + f"queued {counts['queued']}, settling {len(self.settler.pending)}, "
            f"done {counts['done']}; last run {last or 'none yet'}"
        )

    def _publish_waiting(self) -> None:
        """The settling files, for ``ionwarden status`` (a state row, written when it changes)."""
        text = json.dumps(self.settler.waiting(), sort_keys=True)
        if text == self._waiting_published:
            return
        try:
            with db.write(self._conn()):
                jobs.set_state(self._conn(), WAITING_KEY, text)
        except sqlite3.Error as exc:  # a full disk: status shows the last list; nothing is lost
            log.warning("store.unwritable", error=str(exc), during="status")
            return
        self._waiting_published = text

    # -- a store that refuses writes --------------------------------------------------------------

    def store_failed(self, exc: sqlite3.Error, *, at_start: bool = False) -> None:
        """A write to the state store failed (full disk, file-size limit, I/O error): report it
        once per outage (log, STATUS=, one direct alert); the worker retries with back-off.
        ``at_start``: the store could not be opened; nothing runs yet to clear the fault."""
        reason = str(exc) or type(exc).__name__
        with self._fault_lock:
            first = self.store_fault is None
            self.store_fault = None if at_start else reason
        if not first:
            return
        path = self.state_dir / db.DB_NAME
        log.error("store.unwritable", error=reason, database=str(path))
        sdnotify.notify(f"STATUS=state store not writable ({reason}); retrying")
        notifier = self.notifier
        if notifier is None and at_start:
            # No store yet, but the channels need none: one message straight to apprise.
            notifier = self.notifier = self._make_notifier(self.config)
        if notifier is not None:
            notifier.write_event(DaemonEvent.STORE_UNWRITABLE, error=reason)
            notifier.send_direct(
                f"{self.config.instrument.name}: state store not writable",
                f"ionwarden cannot write its state database {shown(path)}: {reason}. "
                "Runs are not judged until it can (free space on that disk); the daemon keeps "
                "watching and retries on its own.",
            )

    def _store_recovered(self, conn: sqlite3.Connection) -> None:
        """The worker's probe write went through: clear the fault, say so, look for the files
        that arrived while nothing could be queued."""
        with self._fault_lock:
            reason, self.store_fault = self.store_fault, None
        if reason is None:
            return
        log.info("store.recovered", error_was=reason)
        notifier = self.notifier
        if notifier is not None:
            try:
                with db.write(conn):
                    notifier.record_event(
                        conn, DaemonEvent.STORE_RECOVERED, self.clock(), error=reason
                    )
            except sqlite3.Error as exc:
                self.store_failed(exc)
                return
            notifier.write_event(DaemonEvent.STORE_RECOVERED, error_was=reason)
            notifier.wake()
        self.rescan.set("state store writable again")

    # -- reload ---------------------------------------------------------------------------------

    def _reload(self) -> None:
        source = self.config.source
        if source is None:
            return
        sdnotify.notify("RELOADING=1")
        try:
            new = config_mod.load(source)
            notifier = self._make_notifier(new)
        except IonwardenError as exc:
            text = str(exc).replace("\n", "; ")
            log.error("config.rejected", config=str(source), error=text)
            current = self._notifier()
            with db.write(self._conn()):
                current.record_event(
                    self._conn(), DaemonEvent.CONFIG_REJECTED, self.clock(), error=text
                )
            current.write_event(DaemonEvent.CONFIG_REJECTED, error=text)
            sdnotify.notify("READY=1")
            return
        old = self.config
        self.config = new
        self.settler.watch = new.watch
        self.settler.vendor = new.convert.patterns
        self._notifier().stop_delivery(2.0)
        self.notifier = notifier
        notifier.start_delivery()
        if self.pipeline is not None:
            self.pipeline.reconfigure(new, notifier)
        if new.central != old.central or new.instrument.name != old.instrument.name:
            self._stop_publisher()
            self._start_publisher(new)
        if (
            _watched(new) != _watched(old)
            and self._observer is not None
            and self._overflow is not None
        ):
            watch.stop_watching(self._observer, self._overflow)
            self._observer, self._overflow = watch.start_watching(
                _watched(new), self.hints, self.rescan
            )
            self.rescan.set("watch settings changed")
        if new.metrics != old.metrics or new.instrument.name != old.instrument.name:
            stop_endpoint(self._endpoint)
            self._endpoint = start_endpoint(new, self.state_dir)
        log.info("config.reloaded", config=str(source))
        sdnotify.notify("READY=1")

    def _start_publisher(self, config: Config) -> None:
        """With ``central.url``: the thread that empties the publish queue into PostgreSQL.
        It only starts here; a dead server is its own affair (it retries with back-off)."""
        if config.central.url is None or self.pipeline is None:
            return
        from watcher.central.profile import profile_of
        from watcher.central.publish import Publisher

        publisher = self.publisher = Publisher(
            config.central,
            self.state_dir,
            config.instrument.name,
            clock=self.clock,
            profile=profile_of(config),
        )
        self.pipeline.after_commit = publisher.wake
        publisher.start()
        log.info("central.started", central=publisher.where)

    def _stop_publisher(self) -> None:
        publisher, self.publisher = self.publisher, None
        if self.pipeline is not None:
            self.pipeline.after_commit = None
        if publisher is not None:
            publisher.stop(2.0)

    def _make_notifier(self, config: Config) -> Notifier:
        notifier = Notifier(config, self.state_dir, clock=self.clock)
        notifier.validate_channels()
        return notifier

    # -- worker ---------------------------------------------------------------------------------

    def _work(self) -> None:
        pipeline = self.pipeline
        if pipeline is None:
            return
        retry_s = STORE_RETRY_FIRST_S
        while not self.stop_event.is_set():
            if self.store_fault is not None:
                try:
                    with db.write(pipeline.conn):
                        # Nothing is being measured here, so every "measuring" row is one whose
                        # commit (or a start-up's re-queue) was refused: back to the queue.
                        jobs.requeue_interrupted(pipeline.conn, self.clock())
                        jobs.set_state(pipeline.conn, STORE_PROBE_KEY, f"{self.clock():.3f}")
                except sqlite3.Error as exc:
                    self.store_failed(exc)
                    self.stop_event.wait(retry_s)
                    retry_s = min(2 * retry_s, STORE_RETRY_MAX_S)
                    continue
                retry_s = STORE_RETRY_FIRST_S
                self._store_recovered(pipeline.conn)
            try:
                batch = self._claim_batch(pipeline)
                if not batch:
                    pipeline.flush_health_due()
            except sqlite3.Error as exc:
                self.store_failed(exc)
                continue
            if not batch:
                self.wake_worker.wait(0.5)
                self.wake_worker.clear()
                continue
            job = batch[0]
            pipeline.burst_jobs = []
            try:
                if len(batch) == 1:
                    # A lone run is claimed alone, so it may be read in blocks on every core.
                    self._mark_busy(batch)
                    outcome = pipeline.process(job)
                    if outcome is JobOutcome.REQUEUED and not self.stop_event.is_set():
                        self.stop_event.wait(5.0)  # no spin on a child that does not start
                else:
                    # A burst (after downtime, a copied folder): limits.workers runs measured
                    # at a time, the next batch claimed as soon as the children are free.
                    pipeline.process_burst(
                        batch, lambda: self._claim_batch(pipeline), on_batch=self._mark_busy
                    )
                    if pipeline.child_failed and not self.stop_event.is_set():
                        self.stop_event.wait(5.0)  # no spin on a child that does not start
            except sqlite3.Error as exc:
                # The run's commit (or any write of the job) was refused: nothing of it is
                # stored, so it is measured again once the store takes writes.
                self.store_failed(exc)
            except Exception:
                log.exception("run.failed", file=shown(job.path))
                try:
                    unfinished = pipeline.burst_jobs or batch
                    pipeline.fail_unfinished(unfinished, "internal error (see the daemon log)")
                except sqlite3.Error:
                    log.exception("run.failed", file=shown(job.path))
            finally:
                self._busy_since = None

    def _claim_batch(self, pipeline: Pipeline) -> list[jobs.Job]:
        """Up to ``limits.workers`` queued jobs, oldest first, marked ``measuring``.

        Raises:
            sqlite3.Error: the store refuses the claim.
        """
        batch: list[jobs.Job] = []
        with db.write(pipeline.conn):
            for _ in range(worker_count(self.config.limits.workers)):
                claimed = jobs.claim_next(pipeline.conn, self.clock())
                if claimed is None:
                    break
                batch.append(claimed)
        return batch

    def _mark_busy(self, batch: list[jobs.Job]) -> None:
        """The worker is busy from now with ``batch``: the health check allows its time limit."""
        cfg = self.config
        limit_s = max(time_limit_s(cfg.limits, j.size) for j in batch)
        if any(
            vendor.is_vendor_name(j.path.name, cfg.convert.patterns, cfg.watch.ignore)
            for j in batch
        ):
            limit_s += cfg.convert.timeout_s  # the converter runs first
        self._busy_limit_s = limit_s
        self._busy_since = time.monotonic()


def _watched(config: Config) -> Watch:
    """The watch settings the event handler filters by: vendor run names count as run names
    (a vendor run folder's own events come as folder hints, which the settler names)."""
    extra = tuple(p for p in config.convert.patterns if p not in config.watch.patterns)
    return replace(config.watch, patterns=(*config.watch.patterns, *extra))


def main(args: argparse.Namespace) -> int:
    """``ionwarden run -c CONFIG``: 0 after SIGTERM/SIGINT, 2 bad config, a store written by a
    newer version, a damaged store or another daemon on the same state_dir, 3 unusable or lost
    store."""
    config = config_mod.load(Path(args.config))  # ConfigError -> exit 2 in cli.main
    found = preflight.problems(config)
    if found:
        # Missing folders, unusable alert URLs: config problems no restart cures (exit 2).
        raise ConfigError(found)
    state_dir = state_dir_of(config)
    if db.is_network_fs(db.filesystem_type(state_dir if state_dir.exists() else state_dir.parent)):
        raise StoreError(
            f"state_dir {state_dir} is on a network filesystem; SQLite WAL needs a local disk"
        )
    # Before logging: a second daemon must not even write into the first one's log file.
    lock_fd = lock.acquire(state_dir)  # DaemonRunningError -> exit 2 in cli.main
    logs.configure_daemon(
        state_dir / "logs",
        config.log_keep_days,
        level=logging.DEBUG if getattr(args, "verbose", 0) else logging.INFO,
    )
    daemon = Daemon(config)
    daemon.lock_fd = lock_fd  # held (open) for the process's lifetime

    stopped_by: list[int] = []

    def on_stop(signum: int, frame: FrameType | None) -> None:
        stopped_by.append(signum)
        daemon.request_stop()

    def on_hup(signum: int, frame: FrameType | None) -> None:
        daemon.request_reload()

    signal.signal(signal.SIGTERM, on_stop)
    signal.signal(signal.SIGINT, on_stop)
    signal.signal(signal.SIGHUP, on_hup)
    try:
        if not daemon.start_when_writable():
            return 0
    except (StoreError, StoreTooNewError, StoreCorruptError, ConfigError) as exc:
        log.error("daemon.failed", error=str(exc))
        raise
    code = daemon.run()
    # SIGTERM (systemd's stop) is a clean stop, 0; Ctrl-C is an interruption, 130, as for every
    # command (the shell's 128 + SIGINT).
    if code == 0 and stopped_by and stopped_by[0] == signal.SIGINT:
        return 130
    return code

"""One run through the daemon: hash, measure in a child with limits, judge, record, notify.

The final write for a run is ONE transaction (verdict in the history, the alert step, job
``done``, and the note that its health-log line is owed), so a kill at any moment leaves the run
either wholly unjudged (measured again after restart) or wholly judged; the health-log line is
written after the commit, idempotent, and stays owed until it is written: a health folder that
cannot be written (permissions, a full disk) delays the line, it never loses it nor fails the job.
Nothing slow happens inside a transaction: hashing, the child and judging come first.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import pickle
import select
import signal
import subprocess
import sys
import time
from concurrent.futures import Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from enum import StrEnum
from pathlib import Path
from typing import TYPE_CHECKING, Any

import structlog

from watcher.central import queue as central_queue
from watcher.config import state_dir_of
from watcher.daemon import cgroup, convert
from watcher.daemon.child import HEADER, READY, frame
from watcher.intake import folderwalk, vendor
from watcher.records import DaemonEvent, RunFile, RunMetrics, Status, Verdict, run_time, shown
from watcher.store import controls, db, history, jobs

if TYPE_CHECKING:
    import sqlite3
    import threading
    from collections.abc import Callable

    from watcher.config import Config, Limits
    from watcher.notify.notifier import Notifier

log = structlog.get_logger("watcher.daemon.pipeline")

_HASH_CHUNK = 1 << 20
MAX_MEASURING_THREADS = 64  # limits.workers allows at most 64 runs measured at once
HEALTH_RETRY_S = 5.0  # owed health lines are tried again this often while the folder refuses


class JobOutcome(StrEnum):
    """How ``Pipeline.process`` ended a job (the job row's outcome says more: the status)."""

    JUDGED = "judged"  # measured (or found unreadable), judged, stored and alerted on
    DUPLICATE = "duplicate"  # the same content as a run already judged: linked to it
    SKIPPED = "skipped"  # vanished, changed or unreadable before measuring: the job failed
    REQUEUED = "requeued"  # the daemon is stopping or the child could not start: queued again


class Stopped(Exception):
    """The daemon is stopping: the job goes back to the queue."""


@dataclass(frozen=True, slots=True)
class ChildResult:
    """What the measuring child gave back: metrics, or an error kind and one-line reason."""

    metrics: RunMetrics | None
    error_kind: str | None = None
    error: str | None = None


def time_limit_s(limits: Limits, size: int) -> float:
    """Wall-clock limit for measuring a file of ``size`` bytes: base + per-GB share."""
    return limits.parse_timeout_s + limits.parse_timeout_s_per_gb * size / 1e9


def memory_limit_mb(limits: Limits, size: int) -> int:
    """Address-space limit for the child: the configured MB plus the file size.

    Streaming readers stay flat, but decompression buffers of a large file scale with it.
    """
    return int(limits.parse_memory_mb + size / (1024 * 1024))


def sha256_file(path: Path, stop: threading.Event | None = None) -> str:
    """Content hash, streamed in 1 MiB chunks (checks ``stop`` between chunks)."""
    digest = hashlib.sha256()
    with path.open("rb") as fh:
        while chunk := fh.read(_HASH_CHUNK):
            digest.update(chunk)
            if stop is not None and stop.is_set():
                raise Stopped
    return digest.hexdigest()


class MeasuringChild:
    """One long-lived ``python -m watcher.daemon.child``, spawned on demand, killed past a limit.

    The child pays the interpreter start and the reader imports (about a second) once, not per
    run, so a burst of small files is not bound by process start-up. Past the wall-clock limit
    the child is killed and the next run starts a fresh one; it is also recycled every
    ``recycle_after`` runs so that no slow growth accumulates over months.
    """

    def __init__(self, *, startup_limit_s: float = 120.0, recycle_after: int = 500) -> None:
        self._proc: subprocess.Popen[bytes] | None = None
        self._served = 0
        self._startup_limit_s = startup_limit_s
        self._recycle_after = recycle_after

    def measure(
        self, config: Config, path: Path, size: int, stop: threading.Event | None = None
    ) -> ChildResult:
        """Measure one file in the child; kill it past the time limit, report memory exhaustion."""
        limit_s = time_limit_s(config.limits, size)
        memory_mb = memory_limit_mb(config.limits, size)
        proc = self._ensure(stop)
        # Read before the run: a rise by the time the child dies of SIGKILL means the OOM killer.
        oom_kills_before = cgroup.oom_kills()
        payload = frame(pickle.dumps((config, str(path), memory_mb)))
        try:
            if proc.stdin is None:
                raise BrokenPipeError
            proc.stdin.write(payload)
            proc.stdin.flush()
        except (BrokenPipeError, OSError):
            return self._died(memory_mb, stop, oom_kills_before)
        deadline = time.monotonic() + limit_s
        data = self._read_frame(proc, deadline, stop)
        if data is None:
            # End of output before the deadline is a death even when poll() cannot see it yet:
            # a killed process closes its pipes before it becomes a zombie.
            if proc.poll() is None and time.monotonic() >= deadline:
                self.close()
                shown = f"{limit_s:.0f}" if limit_s >= 10 else f"{limit_s:.2g}"
                return ChildResult(None, "timeout", f"timeout after {shown} s")
            return self._died(memory_mb, stop, oom_kills_before)
        self._served += 1
        try:
            result: tuple[Any, ...] = pickle.loads(data)  # noqa: S301 - our own child
        except (pickle.UnpicklingError, EOFError, AttributeError, ValueError) as exc:
            self.close()
            return ChildResult(None, "corrupt", f"measuring process sent no result ({exc})")
        if self._served >= self._recycle_after or result[1:2] == ("memory",):
            self.close()
        if result[0] == "ok":
            return ChildResult(result[1])
        return ChildResult(None, str(result[1]), str(result[2]))

    def close(self) -> None:
        """Stop the child (kill: it holds nothing worth saving)."""
        proc, self._proc = self._proc, None
        self._served = 0
        if proc is None:
            return
        if proc.poll() is None:
            proc.kill()
        for stream in (proc.stdin, proc.stdout):
            if stream is not None:
                with contextlib.suppress(OSError):
                    stream.close()
        proc.wait(timeout=10)

    def _ensure(self, stop: threading.Event | None) -> subprocess.Popen[bytes]:
        if self._proc is not None and self._proc.poll() is None:
            return self._proc
        self.close()
        env = dict(os.environ)
        # One thread per numeric library: BLAS thread pools reserve address space under RLIMIT_AS.
        env.update(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
        proc = subprocess.Popen(
            [sys.executable, "-m", "watcher.daemon.child"],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=subprocess.DEVNULL,
            env=env,
        )
        self._proc = proc
        if proc.stdout is None:
            raise ChildStartError("the measuring process has no output pipe")
        ready = _read_exact(proc.stdout.fileno(), 1, time.monotonic() + self._startup_limit_s, stop)
        if ready != READY:
            self.close()
            if stop is not None and stop.is_set():
                raise Stopped
            raise ChildStartError("the measuring process did not start")
        return proc

    def _read_frame(
        self, proc: subprocess.Popen[bytes], deadline: float, stop: threading.Event | None
    ) -> bytes | None:
        if proc.stdout is None:
            return None
        fd = proc.stdout.fileno()
        header = _read_exact(fd, HEADER.size, deadline, stop)
        if header is None:
            return None
        (length,) = HEADER.unpack(header)
        return _read_exact(fd, length, deadline, stop)

    def _died(
        self, memory_mb: int, stop: threading.Event | None, oom_kills_before: int | None
    ) -> ChildResult:
        """Why the child died without an answer. Its own RLIMIT_AS MemoryError is answered by
        the child itself (kind ``memory``), so a silent SIGKILL is the OOM killer only when the
        cgroup's counter rose; else a person, a supervisor or an unreadable counter: ``killed``,
        which the pipeline measures once more before calling the run unreadable."""
        proc = self._proc
        try:
            code = proc.wait(timeout=10) if proc is not None else None
        except subprocess.TimeoutExpired:  # closed its output but lives on: end it
            code = None
        self.close()
        if stop is not None and stop.is_set():
            raise Stopped  # systemd signals the whole cgroup on stop: not the file's fault
        if code == -signal.SIGKILL:
            after = cgroup.oom_kills()
            if oom_kills_before is not None and after is not None and after > oom_kills_before:
                return ChildResult(
                    None, "memory", f"out of memory (killed by the kernel, limit {memory_mb} MB)"
                )
            return ChildResult(None, "killed", "measuring process was killed (signal 9)")
        return ChildResult(None, "corrupt", f"measuring process died (exit {code})")


class ChildStartError(Exception):
    """The measuring child did not come up (it is retried with the next run)."""


def _read_exact(fd: int, n: int, deadline: float, stop: threading.Event | None) -> bytes | None:
    """``n`` bytes from ``fd`` by ``deadline``; None on timeout or end of stream."""
    chunks: list[bytes] = []
    got = 0
    while got < n:
        if stop is not None and stop.is_set():
            raise Stopped
        wait_s = min(0.25, deadline - time.monotonic())
        if wait_s <= 0:
            return None
        readable, _, _ = select.select([fd], [], [], wait_s)
        if not readable:
            continue
        chunk = os.read(fd, min(n - got, 1 << 20))
        if not chunk:
            return None
        chunks.append(chunk)
        got += len(chunk)
    return b"".join(chunks)


@dataclass(slots=True)
class _Measuring:
    """A batch of a burst between its claim and its commits: prepared, its children at work."""

    batch: list[jobs.Job]  # in claim order
    config: Config  # the config in force when it was claimed: it is judged by it too
    # (job, content hash, result): the result is None while a child measures the job
    ready: list[tuple[jobs.Job, str | None, ChildResult | None]] = field(default_factory=list)
    futures: dict[int, Future[ChildResult]] = field(default_factory=dict)
    hashes: set[str] = field(default_factory=set)
    outcomes: dict[int, JobOutcome] = field(default_factory=dict)

    @property
    def waiting(self) -> list[jobs.Job]:
        """The jobs not ended yet (not committed, not skipped, not sent back)."""
        return [job for job in self.batch if job.id not in self.outcomes]


@dataclass(slots=True)
class Pipeline:
    """Processes claimed jobs with one connection (the worker thread's).

    Attributes:
        config: the config in force (replaced on reload; read once per job).
        conn: the worker's own SQLite connection.
        notifier: the notify stage: alerts inside the run's transaction, the health log after.
        stop: set when the daemon stops; a job in flight goes back to the queue.
        clock: wall-clock seconds.
    """

    config: Config
    conn: sqlite3.Connection
    notifier: Notifier
    stop: threading.Event
    clock: Callable[[], float] = time.time
    last_file: str | None = None
    child: MeasuringChild = field(default_factory=MeasuringChild)
    # More measuring children for bursts (process_burst): slot 0 is ``child``.
    extra_children: list[MeasuringChild] = field(default_factory=list)
    # The threads that wait on them live as long as the pipeline: a child dies with the thread
    # that started it (PR_SET_PDEATHSIG is per thread), so a pool per batch would kill them.
    _measuring_threads: ThreadPoolExecutor | None = None
    # Every job claimed in the burst being processed (process_burst): after a fault, the
    # daemon marks those still ``measuring`` failed.
    burst_jobs: list[jobs.Job] = field(default_factory=list)
    child_failed: bool = False  # the last burst ended because a measuring child did not start
    # Called after each run's commit: the central publisher's wake-up (None: no central store).
    after_commit: Callable[[], None] | None = None
    health_failing: bool = False  # the last try at the owed health lines failed
    _health_retry_at: float = 0.0  # time.monotonic() of the next try while failing
    # Lines written whose note is not struck off yet: that rides on the next run's commit (or an
    # idle moment), not a transaction of its own, which would add an fsync to every run. A kill
    # before it only re-offers lines the health log already holds (idempotent by run_key).
    _written: list[int] = field(default_factory=list)

    def reconfigure(self, config: Config, notifier: Notifier) -> None:
        """Use a reloaded config and its notifier from the next job on (the job in flight keeps
        the config it started with)."""
        self.config = config
        self.notifier = notifier

    def close(self) -> None:
        """Stop the measuring children; the pipeline starts new ones if it is used again."""
        self.child.close()
        for child in self.extra_children:
            child.close()
        threads, self._measuring_threads = self._measuring_threads, None
        if threads is not None:
            threads.shutdown(wait=False)

    def process_burst(
        self,
        first: list[jobs.Job],
        claim: Callable[[], list[jobs.Job]],
        on_batch: Callable[[list[jobs.Job]], None] | None = None,
    ) -> dict[int, JobOutcome]:
        """Take the claimed jobs of ``first``, then of every batch ``claim`` gives until it gives
        none, to ``done``, with one measuring child per job of a batch, at once.

        Catching up after downtime is bound by measuring, which is CPU work in the children;
        judging reads the history the earlier runs wrote, so it and the final transaction stay
        one at a time: batch after batch in claim order, each in order of acquisition time
        (then claim order), so baselines and alert sequences come out as if the runs had been
        taken one by one. The next batch is claimed and hashed while the children measure this
        one, and measured while this thread judges and stores this one: the cores that a
        barrier per batch left idle by turns all work.

        A job whose content hash equals another's in its batch, or in the batch being
        committed, goes back to the queue, to be linked to it as a duplicate when claimed again.
        ``on_batch`` is told of the jobs in hand as each batch starts (the daemon's time limit
        for a busy worker). Returns job id -> outcome of every job ended. Stopping, or a child
        that does not start, puts every job not yet committed back to the queue; any other
        error is raised after the next batch went back to the queue (the jobs of the batch
        being committed are still ``measuring``: ``burst_jobs`` lists every job claimed).
        """
        current: _Measuring | None = None
        following: _Measuring | None = None
        outcomes: dict[int, JobOutcome] = {}
        self.burst_jobs = list(first)
        self.child_failed = False
        try:
            if on_batch is not None:
                on_batch(first)
            current = _Measuring(batch=first, config=self.config)
            self._prepare_all(current, set())
            self._submit(current)
            while current is not None:
                # While the children measure this batch: claim and hash the next one, so that
                # they start on it the moment they are free.
                following = None
                if not self.stop.is_set():
                    batch = claim()
                    if batch:
                        self.burst_jobs.extend(batch)
                        if on_batch is not None:
                            on_batch([*current.waiting, *batch])
                        following = _Measuring(batch=batch, config=self.config)
                        self._prepare_all(following, current.hashes)
                results = self._measured(current)
                if following is not None:
                    self._submit(following)
                # ... and they measure it while this thread judges and stores this one.
                self._commit_all(current, results)
                outcomes.update(current.outcomes)
                current, following = following, None
        except (Stopped, ChildStartError) as exc:
            self._abandon([current, following], outcomes)
            self.child_failed = isinstance(exc, ChildStartError)
            why = "daemon stopping" if isinstance(exc, Stopped) else str(exc)
            requeued = sum(outcome is JobOutcome.REQUEUED for outcome in outcomes.values())
            log.info("run.requeued", reason=why, runs=requeued)
        except BaseException:
            # A store that refuses the commit or the next claim, or a fault of ours: the
            # children finish first (no child is reused busy: the claim comes while they
            # measure), and the next batch goes back to the queue untouched by the fault; the
            # daemon handles the batch in hand (its jobs still ``measuring``: re-queued when
            # the store takes writes, or marked failed).
            self._settle_futures(current)
            self._settle_futures(following)
            if following is not None:
                with contextlib.suppress(Exception), db.write(self.conn):
                    for job in following.waiting:
                        jobs.release(self.conn, job.id, self.clock())
            raise
        return outcomes

    def _prepare_all(self, started: _Measuring, committing: set[str]) -> None:
        """Prepare every job of the batch (identity, hash, duplicate); ``committing``: the
        hashes of the batch not yet stored."""
        for job in started.batch:
            if job.incomplete is not None:
                result = ChildResult(None, "incomplete", job.incomplete)
                started.ready.append((job, job.sha256, result))
                continue
            with structlog.contextvars.bound_contextvars(job_id=job.id, file=shown(job.path)):
                prepared = self._prepare(job)
            if isinstance(prepared, JobOutcome):
                started.outcomes[job.id] = prepared
            elif prepared in started.hashes or prepared in committing:
                self._release(job)
                started.outcomes[job.id] = JobOutcome.REQUEUED
            else:
                started.hashes.add(prepared)
                started.ready.append((job, prepared, None))

    def _submit(self, started: _Measuring) -> None:
        """Set the measuring of the prepared jobs going, one child each."""
        config = started.config
        # One process per run already uses the cores: no blocks inside each child. A lone run
        # keeps them (a large run at the end of a burst is read on every core).
        if len(started.batch) > 1:
            config = replace(config, limits=replace(config.limits, workers=1))
        waiting = [job for job, _, result in started.ready if result is None]
        started.futures = self._submit_many(config, waiting)

    def _measured(self, batch: _Measuring) -> list[tuple[jobs.Job, str | None, ChildResult]]:
        """Wait for every child of ``batch``; its jobs with their results, in commit order."""
        # Every child answers (or dies) before it is used again; result() then re-raises
        # Stopped / ChildStartError.
        wait(batch.futures.values())
        results = [
            (job, sha, result if result is not None else batch.futures[job.id].result())
            for job, sha, result in batch.ready
        ]
        judged_at = datetime.fromtimestamp(self.clock(), UTC)
        claimed = {job.id: i for i, job in enumerate(batch.batch)}

        def order(item: tuple[jobs.Job, str | None, ChildResult]) -> tuple[datetime, int]:
            job, _, result = item
            run_file = RunFile(path=job.path, size=job.size, mtime_ns=job.mtime_ns)
            return run_time(result.metrics, run_file, judged_at), claimed[job.id]

        return sorted(results, key=order)

    def _commit_all(
        self, batch: _Measuring, results: list[tuple[jobs.Job, str | None, ChildResult]]
    ) -> None:
        for job, sha256, result in results:
            with structlog.contextvars.bound_contextvars(job_id=job.id, file=shown(job.path)):
                batch.outcomes[job.id] = self._commit(batch.config, job, sha256, result)
                structlog.contextvars.unbind_contextvars("run_id")

    def _abandon(self, batches: list[_Measuring | None], outcomes: dict[int, JobOutcome]) -> None:
        """Stop: wait for the children, stop them, put every job not committed back."""
        for batch in batches:
            self._settle_futures(batch)
        self.close()
        with db.write(self.conn):
            for batch in batches:
                if batch is None:
                    continue
                for job in batch.waiting:
                    jobs.release(self.conn, job.id, self.clock())
                    batch.outcomes[job.id] = JobOutcome.REQUEUED
                outcomes.update(batch.outcomes)

    @staticmethod
    def _settle_futures(batch: _Measuring | None) -> None:
        if batch is not None:
            wait(batch.futures.values())

    def _release(self, job: jobs.Job) -> None:
        with db.write(self.conn):
            jobs.release(self.conn, job.id, self.clock())

    def _submit_many(self, config: Config, batch: list[jobs.Job]) -> dict[int, Future[ChildResult]]:
        """Start measuring each job in its own child, all at once; job id -> its future."""
        if not batch:
            return {}
        while len(self.extra_children) < len(batch) - 1:
            self.extra_children.append(MeasuringChild())
        children = [self.child, *self.extra_children]
        if self._measuring_threads is None:
            # Threads start as tasks need them, up to this bound; idle ones wait for the next.
            self._measuring_threads = ThreadPoolExecutor(
                max_workers=MAX_MEASURING_THREADS, thread_name_prefix="measure"
            )
        pool = self._measuring_threads
        return {
            job.id: pool.submit(self._measure_logged, config, job, child)
            for job, child in zip(batch, children, strict=False)
        }

    def process(self, job: jobs.Job) -> JobOutcome:
        """Take a claimed job to ``done`` (back to ``queued`` when stopping); returns outcome."""
        config = self.config
        structlog.contextvars.bind_contextvars(job_id=job.id, file=shown(job.path))
        try:
            return self._process(config, job)
        except (Stopped, ChildStartError) as exc:
            self.child.close()
            with db.write(self.conn):
                jobs.release(self.conn, job.id, self.clock())
            why = "daemon stopping" if isinstance(exc, Stopped) else str(exc)
            log.info("run.requeued", reason=why)
            return JobOutcome.REQUEUED
        finally:
            structlog.contextvars.unbind_contextvars("job_id", "file", "run_id")

    def _process(self, config: Config, job: jobs.Job) -> JobOutcome:
        """Prepare (identity, duplicate), measure (in the child), commit (store, alerts, log)."""
        if job.incomplete is not None:
            return self._commit(
                config, job, job.sha256, ChildResult(None, "incomplete", job.incomplete)
            )
        prepared = self._prepare(job)
        if isinstance(prepared, JobOutcome):
            return prepared
        return self._commit(config, job, prepared, self._measure(config, job))

    def _prepare(self, job: jobs.Job) -> str | JobOutcome:
        """The file's content hash, or the outcome when the job ends here: the file vanished or
        changed since it settled, cannot be read, or holds what an earlier run already held."""
        path = job.path
        watch_cfg = self.config.watch
        if not watch_cfg.follow_symlinks_out and folderwalk.leads_outside(path, watch_cfg.folders):
            # Re-pointed since it settled: the link is still not followed out of the folders.
            return self._drop(job, "a symbolic link out of the watched folders: not measured")
        is_vendor = self._is_vendor(job)
        try:
            if is_vendor:
                tree = vendor.tree_stat(path)  # a vendor run folder: its whole tree
                if tree is None:
                    raise FileNotFoundError(path)
                identity = (tree.size, tree.mtime_ns)
            else:
                st = path.stat()
                identity = (st.st_size, st.st_mtime_ns)
        except OSError:
            return self._drop(job, "vanished before it was measured")
        if identity != (job.size, job.mtime_ns):
            # Changed since it settled: the new identity gets its own job from the next look.
            return self._drop(job, "changed before it was measured")
        try:
            if is_vendor:
                sha256 = convert.tree_sha256(path, self.stop)
            else:
                sha256 = sha256_file(path, self.stop)
        except convert.ConvertStopped:
            raise Stopped from None
        except OSError as exc:
            return self._drop(job, f"cannot be read: {exc.strerror}")
        # One worker: no other job can finish between this read and the commit.
        twin = jobs.same_content(self.conn, sha256, job.id)
        if twin is None:
            return sha256
        with db.write(self.conn):
            jobs.finish(
                self.conn,
                job.id,
                self.clock(),
                state=jobs.JobState.DONE,
                outcome=JobOutcome.DUPLICATE,
                run_id=twin.run_id,
                duplicate_of=twin.id,
                sha256=sha256,
            )
        log.info("run.duplicate", same_as=shown(twin.path), run_id=twin.run_id)
        # Silent for alerts by design, but the health log shows that the file arrived.
        self.notifier.write_event(
            DaemonEvent.DUPLICATE,
            file=shown(path.name),
            path=shown(path),
            duplicate_of=shown(twin.path.name),
            run_id=twin.run_id,
        )
        return JobOutcome.DUPLICATE

    def _measure_logged(self, config: Config, job: jobs.Job, child: MeasuringChild) -> ChildResult:
        """``_measure`` in a thread of its own, its log lines naming the job as ``process`` does
        (context variables do not cross into a pool's threads)."""
        with structlog.contextvars.bound_contextvars(job_id=job.id, file=shown(job.path)):
            return self._measure(config, job, child)

    def _measure(
        self, config: Config, job: jobs.Job, child: MeasuringChild | None = None
    ) -> ChildResult:
        """The run's metrics from the measuring child, or why there are none.

        A child killed for no reason the daemon can see (kind ``killed``: not its own memory
        limit, not the OOM killer) says nothing about the file, so the run is measured once more
        in a fresh child; killed again, it is unreadable with that reason.
        """
        child = self.child if child is None else child
        started = time.monotonic()
        target, size = job.path, job.size
        if self._is_vendor(job):
            converted = self._convert(config, job)
            if isinstance(converted, ChildResult):
                log.warning("run.unreadable", kind=converted.error_kind, reason=converted.error)
                return converted
            target, size = converted, converted.stat().st_size
        result = child.measure(config, target, size, self.stop)
        if result.error_kind == "killed":
            log.warning("child.killed", reason=result.error, measuring_again=True)
            result = child.measure(config, target, size, self.stop)
        if result.metrics is not None and target != job.path:
            # Measured, recorded, reported and alerted under the vendor run's own name.
            note = f"converted from the vendor run by {Path(config.convert.command[0]).name}"
            result = ChildResult(
                replace(
                    result.metrics,
                    file=job.path.name,
                    notes=(*result.metrics.notes, shown(note)),
                )
            )
        if result.metrics is not None:
            log.info(
                "run.measured",
                duration_s=round(time.monotonic() - started, 3),
                ms1_count=result.metrics.signal.ms1_count,
            )
        else:
            log.warning("run.unreadable", kind=result.error_kind, reason=result.error)
        return result

    def _is_vendor(self, job: jobs.Job) -> bool:
        """Whether the job is a vendor run for the converter (``convert.patterns``)."""
        cfg = self.config
        return vendor.is_vendor_name(job.path.name, cfg.convert.patterns, cfg.watch.ignore)

    def _convert(self, config: Config, job: jobs.Job) -> Path | ChildResult:
        """The converted run file of a vendor run, or the failure that makes it unreadable."""
        out_dir = convert.output_dir(state_dir_of(config), job.id)
        started = time.monotonic()
        try:
            written = convert.convert(job.path, config.convert, out_dir, self.stop)
        except convert.ConvertStopped:
            raise Stopped from None
        except convert.ConvertFailed as exc:
            return ChildResult(None, "convert", exc.reason)
        except OSError as exc:  # the state folder refuses the output folder
            return ChildResult(None, "convert", f"converter output folder: {exc.strerror}")
        log.info(
            "run.converted",
            output=shown(written.name),
            duration_s=round(time.monotonic() - started, 3),
        )
        return written

    def _commit(
        self, config: Config, job: jobs.Job, sha256: str | None, result: ChildResult
    ) -> JobOutcome:
        """Judge, then store the run, its alerts and the job's end in one transaction; the
        health-log line follows the commit."""
        run_file = RunFile(path=job.path, size=job.size, mtime_ns=job.mtime_ns, sha256=sha256)
        verdict = self._judge(config, run_file, result)
        now_s = self.clock()
        with db.write(self.conn):
            run_id = history.record_verdict(self.conn, verdict)
            self.notifier.record_verdict(self.conn, verdict, run_id, now_s)
            jobs.finish(
                self.conn,
                job.id,
                now_s,
                state=jobs.JobState.DONE,
                outcome=str(verdict.status),
                run_id=run_id,
                sha256=sha256,
            )
            jobs.update_health_pending(self.conn, add=run_id, written=self._written)
            if config.central.url is not None:
                # In this transaction: the run and its alert changes reach the central store
                # exactly when they are committed here, and in the same order.
                central_queue.queue_judged(self.conn, config.instrument.name, run_id, now_s)
        self._written = []
        if self.after_commit is not None:
            self.after_commit()
        structlog.contextvars.bind_contextvars(run_id=run_id)
        self.flush_health()
        self.last_file = shown(job.path.name)
        log.info(
            "run.judged",
            status=str(verdict.status),
            findings=len(verdict.findings),
            error=verdict.error,
        )
        return JobOutcome.JUDGED

    def write_health(self, run_id: int) -> None:
        """The health-log line, after the commit; idempotent by the run's file identity.

        Built from the run as stored, not from the verdict in memory, so that the line written
        now and the one re-offered after a restart (``resume_health_lines``) are the same.

        Raises:
            OSError: the health folder or the day's file cannot be written.
        """
        row = history.get_run(self.conn, run_id)
        if row is not None:
            self.notifier.write_stored_health(row)

    def flush_health(self) -> int:
        """Write the owed health lines, oldest first (struck off later: ``_written``); returns
        how many are still owed. Stops at the first that fails: the folder refuses them all."""
        pending = [r for r in jobs.health_pending(self.conn) if r not in self._written]
        written: list[int] = []
        error: OSError | None = None
        for run_id in pending:
            try:
                self.write_health(run_id)
            except OSError as exc:
                error = exc
                break
            written.append(run_id)
        self._written.extend(written)
        owed = len(pending) - len(written)
        if error is not None:
            self._health_retry_at = time.monotonic() + HEALTH_RETRY_S
            if not self.health_failing:  # once per outage, not every retry
                log.warning(
                    "healthlog.write_failed",
                    error=shown(f"{error.strerror or error}: {error.filename or ''}"),
                    owed=owed,
                    retry_every_s=HEALTH_RETRY_S,
                )
            self.health_failing = True
        elif self.health_failing:
            log.info("healthlog.caught_up", lines=len(written))
            self.health_failing = False
        return owed

    def flush_health_due(self) -> None:
        """From the worker's idle loop: try the owed lines again once the retry wait passed,
        and strike off the lines written since the last commit."""
        if self.health_failing and time.monotonic() >= self._health_retry_at:
            self.flush_health()
        self.strike_written()

    def strike_written(self) -> None:
        """Strike the written lines off the note now (idle, start-up), in one transaction."""
        if self._written:
            with db.write(self.conn):
                jobs.update_health_pending(self.conn, written=self._written)
            self._written = []

    def _judge(self, config: Config, run_file: RunFile, result: ChildResult) -> Verdict:
        judged_at = datetime.fromtimestamp(self.clock(), UTC)
        metrics = result.metrics
        acquired_at = run_time(metrics, run_file, judged_at)
        if metrics is None:
            return Verdict(
                run_file=run_file,
                status=Status.UNREADABLE,
                acquired_at=acquired_at,
                error=result.error,
                error_kind=result.error_kind,
                judged_at=judged_at,
            )
        from watcher.rules.judge import judge

        judgement = judge(
            metrics,
            file_name=run_file.path.name,
            acquired_at=acquired_at,
            checks=config.checks,
            # the history starts again after an event that resets baselines (ionwarden note)
            history=controls.ResettableHistory(self.conn, instrument=config.instrument.name),
        )
        return Verdict(
            run_file=run_file,
            status=judgement.status,
            acquired_at=acquired_at,
            metrics=metrics,
            findings=judgement.findings,
            evaluated=judgement.evaluated,
            trend_states=judgement.trend_states,
            judged_at=judged_at,
        )

    def fail(self, job: jobs.Job, outcome: str) -> None:
        """Mark a claimed job ``failed`` with ``outcome``, in its own transaction."""
        with db.write(self.conn):
            jobs.finish(
                self.conn, job.id, self.clock(), state=jobs.JobState.FAILED, outcome=outcome
            )

    def fail_unfinished(self, batch: list[jobs.Job], outcome: str) -> None:
        """Mark the jobs of ``batch`` that are still being measured ``failed`` (the others
        were committed or went back to the queue)."""
        with db.write(self.conn):
            for job in batch:
                stored = jobs.get(self.conn, job.id)
                if stored is not None and stored.state is jobs.JobState.MEASURING:
                    jobs.finish(
                        self.conn, job.id, self.clock(), state=jobs.JobState.FAILED, outcome=outcome
                    )

    def _drop(self, job: jobs.Job, why: str) -> JobOutcome:
        self.fail(job, why)
        log.info("run.skipped", reason=why)
        return JobOutcome.SKIPPED

    def resume_health_lines(self) -> int:
        """Start-up: write the owed health lines, and re-offer the newest ones (a store from
        before the owed-lines note: a kill may have cut one off); returns how many are owed."""
        for run_id in reversed(jobs.recent_judged(self.conn)):
            try:
                self.write_health(run_id)
            except OSError:
                break  # flush_health below reports the folder and keeps what is owed
        owed = self.flush_health()
        self.strike_written()
        return owed

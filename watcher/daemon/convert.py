"""Vendor runs through the lab's converter: run it with a time limit, find the run file it wrote.

The converter is the lab's own program (``convert.command``), run without a shell in a new
process group, with ``{input}`` set to the vendor run (only read: it is never moved, changed
or deleted here) and ``{output_dir}`` to an empty folder ``<state_dir>/converted/job-<id>``.
A converter that exits non-zero, runs past ``convert.timeout_s`` (its whole process group is
killed: converters often start helpers) or writes no run file is the run's failure, with the
exit code and the last line it wrote to stderr. Converted files stay for the health log's
retention (``prune``), so an operator can open what was measured.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import signal
import subprocess
import tempfile
import time
from pathlib import Path
from typing import IO, TYPE_CHECKING, Any

from watcher.records import shown

if TYPE_CHECKING:
    import threading

    from watcher.config import Convert

CONVERTED_DIR = "converted"
RUN_SUFFIXES = (".mzml", ".mzml.gz", ".mzxml", ".mgf")
_POLL_S = 0.1
_STDERR_TAIL_BYTES = 8192
_HASH_CHUNK = 1 << 20


class ConvertFailed(Exception):
    """The converter gave no run file; ``reason`` is one line for the verdict."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


class ConvertStopped(Exception):
    """The daemon is stopping: the converter was killed, the run goes back to the queue."""


def output_dir(state_dir: Path, job_id: int) -> Path:
    """Where the converter of job ``job_id`` writes (emptied before every attempt)."""
    return state_dir / CONVERTED_DIR / f"job-{job_id}"


def argv_for(settings: Convert, run: Path, out_dir: Path) -> list[str]:
    """The converter's argv with ``{input}`` and ``{output_dir}`` filled in (no shell)."""
    return [
        arg.replace("{input}", str(run)).replace("{output_dir}", str(out_dir))
        for arg in settings.command
    ]


def convert(
    run: Path, settings: Convert, out_dir: Path, stop: threading.Event | None = None
) -> Path:
    """Run the converter on ``run``; return the run file it wrote into ``out_dir``.

    Raises:
        ConvertFailed: it could not start, exited non-zero, ran past its limit, or wrote no
            run file (``.mzML``, ``.mzML.gz``, ``.mzXML``, ``.mgf``).
        ConvertStopped: ``stop`` was set while it ran (it is killed first).
    """
    if out_dir.exists():
        shutil.rmtree(out_dir)  # a previous attempt's leftovers (the daemon stopped midway)
    out_dir.mkdir(parents=True)
    argv = argv_for(settings, run, out_dir)
    program = os.path.basename(argv[0])
    with tempfile.TemporaryFile() as errors:
        try:
            proc = subprocess.Popen(
                argv,
                stdin=subprocess.DEVNULL,
                stdout=subprocess.DEVNULL,
                stderr=errors,
                cwd=out_dir,
                start_new_session=True,  # its own process group: a kill reaches its helpers
            )
        except OSError as exc:
            raise ConvertFailed(
                f"converter {shown(program)} cannot be started: {exc.strerror or exc}"
            ) from None
        code = _wait(proc, settings.timeout_s, stop)
        _kill_group(proc)  # helpers it left running
        last = _last_line(errors)
    said = f": {last}" if last else ""
    if code is None:
        raise ConvertFailed(
            f"converter {shown(program)} ran past its {settings.timeout_s:g} s limit and was "
            f"stopped{said}"
        )
    if code < 0:
        name = _signal_name(-code)
        raise ConvertFailed(f"converter {shown(program)} was killed by {name}{said}")
    if code != 0:
        raise ConvertFailed(f"converter {shown(program)} exited with code {code}{said}")
    written = run_files(out_dir)
    if not written:
        raise ConvertFailed(
            f"converter {shown(program)} wrote no mzML, mzXML or MGF file (exit code 0){said}"
        )
    # One run in, one file out is the usual; of several, the largest is the run itself
    # (converters may write a small side file of the same kind, e.g. a blank segment).
    return max(written, key=lambda p: (p.stat().st_size, str(p)))


def run_files(folder: Path) -> list[Path]:
    """The run files under ``folder`` (by name: the readers decide the format from content)."""
    out: list[Path] = []
    for dirpath, _dirs, files in os.walk(folder):
        for name in files:
            if name.lower().endswith(RUN_SUFFIXES):
                out.append(Path(dirpath) / name)
    return out


def _wait(
    proc: subprocess.Popen[bytes], limit_s: float, stop: threading.Event | None
) -> int | None:
    """The exit code, or None when it ran past ``limit_s`` (then it is killed)."""
    deadline = time.monotonic() + limit_s
    while True:
        try:
            return proc.wait(timeout=_POLL_S)
        except subprocess.TimeoutExpired:
            pass
        if stop is not None and stop.is_set():
            _kill_group(proc)
            proc.wait()
            raise ConvertStopped
        if time.monotonic() >= deadline:
            _kill_group(proc)
            proc.wait()
            return None


def _kill_group(proc: subprocess.Popen[bytes]) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        return  # the group is gone already


def _last_line(fh: IO[bytes]) -> str:
    """The last non-empty line the converter wrote to stderr, printable, at most 200 chars."""
    size = fh.seek(0, os.SEEK_END)
    fh.seek(max(0, size - _STDERR_TAIL_BYTES))
    tail = fh.read().decode("utf-8", "replace")
    lines = [line.strip() for line in tail.splitlines() if line.strip()]
    return shown(lines[-1][:200]) if lines else ""


def _signal_name(number: int) -> str:
    try:
        return signal.Signals(number).name
    except ValueError:
        return f"signal {number}"


def tree_sha256(path: Path, stop: threading.Event | None = None) -> str:
    """Content hash of a vendor run: a file's bytes, or a folder's relative paths and bytes in
    sorted order (so the same run copied twice is the same content). Symbolic links inside are
    hashed by their target text, never followed."""
    digest = hashlib.sha256()
    if path.is_file():
        _hash_file(digest, path, stop)
        return digest.hexdigest()
    entries: list[tuple[str, Path]] = []
    for dirpath, dirs, files in os.walk(path, followlinks=False):
        dirs.sort()
        for name in (*dirs, *files):
            full = Path(dirpath) / name
            entries.append((full.relative_to(path).as_posix(), full))
    for rel, full in sorted(entries):
        digest.update(rel.encode("utf-8", "surrogateescape") + b"\0")
        if full.is_symlink():
            digest.update(b"L" + os.readlink(full).encode("utf-8", "surrogateescape"))
        elif full.is_file():
            digest.update(b"F")
            _hash_file(digest, full, stop)
        digest.update(b"\0")
    return digest.hexdigest()


def _hash_file(digest: Any, path: Path, stop: threading.Event | None) -> None:
    with path.open("rb") as fh:
        while chunk := fh.read(_HASH_CHUNK):
            digest.update(chunk)
            if stop is not None and stop.is_set():
                raise ConvertStopped


def prune(state_dir: Path, keep_days: int, now_s: float) -> int:
    """Remove converted runs older than ``keep_days`` (the health log's retention); returns
    how many folders went. Only ``<state_dir>/converted/job-*`` folders are touched."""
    root = state_dir / CONVERTED_DIR
    cutoff_s = now_s - keep_days * 86400.0
    removed = 0
    try:
        entries = list(os.scandir(root))
    except OSError:
        return 0
    for entry in entries:
        try:
            if not entry.name.startswith("job-") or not entry.is_dir(follow_symlinks=False):
                continue
            if entry.stat(follow_symlinks=False).st_mtime >= cutoff_s:
                continue
            shutil.rmtree(entry.path)
            removed += 1
        except OSError:
            continue  # the next daily prune tries again
    return removed

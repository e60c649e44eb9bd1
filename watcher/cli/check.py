"""The ``ionwarden check`` command: measure and judge run files once, print a table or JSON.

Each file is measured in this process (``watcher.measure.run.measure_file``), judged against the
config's checks and, when ``state_dir`` holds a history, against earlier runs. A file that cannot
be read becomes an ``unreadable`` run with a one-line reason; the other files are still measured.
Exit codes are those of ``watcher.cli``: 0 every run ok/notice, 1 any warning, critical or
unreadable run, 2 a config error (raised as ConfigError to the dispatcher).
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import stat
import sys
from collections.abc import Callable, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

from watcher.cli.exitcodes import ExitCode
from watcher.records import (
    ReadFailure,
    RunFile,
    RunMetrics,
    Status,
    Verdict,
    printable,
    run_time,
    shown,
)

if TYPE_CHECKING:
    import argparse
    import sqlite3

    from watcher.config import Config

Progress = Callable[[int, int], None]


def main(args: argparse.Namespace) -> int:
    """Run ``ionwarden check``; returns the exit code (see the module docstring)."""
    from watcher import config as config_module

    if args.config:
        config = config_module.load(args.config)
    else:
        # Say so: thresholds of the embedded demo config are not the lab's.
        _warn(
            "no -c CONFIG given: judging with the embedded demo config (watcher/data/default.yaml)"
        )
        config = config_module.load_default()
    mzqc_to_stdout = args.mzqc == "-"
    if mzqc_to_stdout and args.json:
        _warn("--mzqc - and --json both write to stdout: choose one")
        return ExitCode.USAGE
    record = bool(getattr(args, "record", False))
    if record and config.state_dir is None:
        _warn("--record needs state_dir in the config; nothing recorded")
        record = False
    conn = _open_store(config, record=record)
    try:
        verdicts = []
        for name in args.files:
            verdict = _check_one(
                Path(name),
                config,
                conn=conn,
                record=record,
                show_progress=not args.no_progress,
            )
            verdicts.append(verdict)
            if not args.json and not mzqc_to_stdout:
                try:
                    render_text(verdict, sys.stdout, colour=_use_colour(sys.stdout))
                    sys.stdout.flush()
                except BrokenPipeError:
                    _silence_stdout()
    finally:
        if conn is not None:
            conn.close()
    if args.json:
        try:
            json.dump({"runs": [run_to_dict(v) for v in verdicts]}, sys.stdout, indent=2)
            sys.stdout.write("\n")
            sys.stdout.flush()
        except BrokenPipeError:
            _silence_stdout()
    if args.mzqc:
        _write_mzqc(args.mzqc, verdicts)
    return exit_code(verdicts)


def exit_code(verdicts: Sequence[Verdict]) -> int:
    """4 when a named file could not be opened, else 0 when every run is ok or notice, else 1."""
    if any(v.error_kind == "missing" for v in verdicts):
        return ExitCode.NO_INPUT
    return ExitCode.OK if all(v.status.accepted for v in verdicts) else ExitCode.ATTENTION


def check_file(
    path: Path,
    config: Config,
    *,
    history: Any = None,
    progress: Progress | None = None,
    now: datetime | None = None,
) -> Verdict:
    """Measure and judge one file; never raises for a bad file (it becomes ``unreadable``).

    Raises:
        ConfigError: an ion of the config cannot be resolved (a config problem, not the file's).
    """
    from watcher.measure.run import measure_or_failure
    from watcher.rules.judge import judge

    judged_at = now or datetime.now(tz=UTC)
    try:
        st = path.stat()
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        return _unreadable(
            RunFile(path=path, size=0, mtime_ns=0), f"cannot open: {reason}", "missing", judged_at
        )
    run_file = RunFile(path=path, size=st.st_size, mtime_ns=st.st_mtime_ns)
    if not stat.S_ISREG(st.st_mode) and not stat.S_ISDIR(st.st_mode):
        # A FIFO or device would block the read forever (or never end): refuse it by its type.
        return _unreadable(run_file, "cannot read: not a regular file", "io", judged_at)
    outcome = measure_or_failure(path, config, progress=progress)
    if isinstance(outcome, ReadFailure):
        return _unreadable(run_file, outcome.reason, outcome.kind, judged_at)
    metrics = outcome
    acquired_at = run_time(metrics, run_file, judged_at)
    judgement = judge(
        metrics,
        file_name=path.name,
        acquired_at=acquired_at,
        checks=config.checks,
        history=history,
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


def _check_one(
    path: Path,
    config: Config,
    *,
    conn: sqlite3.Connection | None,
    record: bool,
    show_progress: bool,
) -> Verdict:
    from watcher.cli.progress import ProgressBar

    history = None
    if conn is not None:
        from watcher.store.controls import ResettableHistory

        history = ResettableHistory(conn, instrument=config.instrument.name)
    with ProgressBar(shown(path.name), enabled=None if show_progress else False) as bar:
        verdict = check_file(path, config, history=history, progress=bar)
    if record and conn is not None:
        verdict = _record(conn, verdict)
    return verdict


def _record(conn: sqlite3.Connection, verdict: Verdict) -> Verdict:
    import dataclasses

    from watcher.daemon.pipeline import sha256_file
    from watcher.store import db
    from watcher.store.history import record_verdict

    run_file = verdict.run_file
    if run_file.size or run_file.mtime_ns:
        with contextlib.suppress(OSError):  # the hash completes the identity history keys on
            run_file = dataclasses.replace(run_file, sha256=sha256_file(run_file.path))
    verdict = dataclasses.replace(verdict, run_file=run_file)
    with db.write(conn):
        record_verdict(conn, verdict)
    return verdict


def _silence_stdout() -> None:
    # `ionwarden check ... | head`: the reader left; the measuring and recording still count.
    os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())


def _warn(message: str) -> None:
    sys.stderr.write(f"ionwarden check: {printable(message)}\n")


def _open_store(config: Config, *, record: bool) -> sqlite3.Connection | None:
    """The state database when there is one: writable with --record, else read-only if present."""
    if config.state_dir is None:
        return None
    from watcher.store import db

    if record:
        return db.connect(config.state_dir)
    if not (config.state_dir / db.DB_NAME).exists():
        return None
    return db.connect(config.state_dir, readonly=True)


def _unreadable(run_file: RunFile, reason: str, kind: str, judged_at: datetime) -> Verdict:
    return Verdict(
        run_file=run_file,
        status=Status.UNREADABLE,
        acquired_at=run_time(None, run_file, judged_at),
        error=f"{shown(run_file.path.name)}: unreadable: {reason}",
        error_kind=kind,
        judged_at=judged_at,
    )


def _write_mzqc(target: str, verdicts: Sequence[Verdict]) -> None:
    """The mzQC file at ``target``; ``-`` writes it to stdout (then use it without --json)."""
    from watcher.measure.mzqc import build_mzqc, write_mzqc

    if not any(v.metrics is not None for v in verdicts):
        _warn(f"{target}: not written, no run could be measured")
        return
    if target == "-":
        try:
            json.dump(build_mzqc(verdicts), sys.stdout, indent=2, allow_nan=False)
            sys.stdout.write("\n")
            sys.stdout.flush()
        except BrokenPipeError:
            _silence_stdout()
        return
    try:
        write_mzqc(Path(target), verdicts)
    except OSError as exc:
        _warn(f"{target}: cannot write mzQC: {exc.strerror}")


# --- JSON -----------------------------------------------------------------------------------


def run_to_dict(verdict: Verdict) -> dict[str, Any]:
    """One entry of ``{"runs": [...]}``: the metrics plus status, error and findings."""
    metrics = verdict.metrics
    body: dict[str, Any] = (
        metrics.to_dict()
        if metrics is not None
        else {
            "file": shown(verdict.run_file.path.name),
            "format": _sniffed_format(verdict.run_file.path),
            "acquired_at": None,
            "signal": None,
            "calibrants": [],
            "mass_correction": None,
            "expected_ions": [],
            "notes": [],
        }
    )
    out = {
        # The name as shown everywhere else: a metrics record keeps the raw name, whose
        # undecodable bytes would be lone surrogates that strict JSON readers refuse.
        "file": shown(verdict.run_file.path.name),
        "path": shown(verdict.run_file.path),
        "format": body["format"],
        "status": str(verdict.status),
        "error": verdict.error,
        "error_kind": verdict.error_kind,
        "acquired_at": body["acquired_at"],
        "signal": body["signal"],
        "calibrants": body["calibrants"],
        "expected_ions": body["expected_ions"],
        "mass_correction": body["mass_correction"],
        "findings": [f.to_dict() for f in verdict.findings],
        "notes": body["notes"],
    }
    return _finite(out)  # type: ignore[no-any-return]


def _finite(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_finite(v) for v in value]
    return value


def _sniffed_format(path: Path) -> str | None:
    from watcher.intake.formats import sniff_format

    try:
        if not path.is_file():  # opening a FIFO to sniff it would block
            return None
        return sniff_format(path)
    except Exception:  # the format of a broken file is a nicety, never a second error
        return None


# --- terminal -------------------------------------------------------------------------------

_COLOURS = {
    Status.OK: "32",
    Status.NOTICE: "36",
    Status.WARNING: "33",
    Status.CRITICAL: "31;1",
    Status.UNREADABLE: "31;1",
}
_SEVERITY_COLOURS = {"notice": "36", "warning": "33", "critical": "31;1"}


def _use_colour(stream: TextIO) -> bool:
    # NO_COLOR (no-color.org) is the common convention for turning colour off.
    return stream.isatty() and not os.environ.get("NO_COLOR")


def _paint(text: str, code: str | None, colour: bool) -> str:
    return f"\x1b[{code}m{text}\x1b[0m" if colour and code else text


def _num(value: float | None, spec: str, *, signed: bool = False) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    return format(value, ("+" if signed else "") + spec)


def _table(headers: Sequence[str], rows: Sequence[Sequence[str]], indent: str = "    ") -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(headers)]

    def line(cells: Sequence[str]) -> str:
        first = cells[0].ljust(widths[0])
        rest = [c.rjust(w) for c, w in zip(cells[1:], widths[1:], strict=True)]
        return (indent + "  ".join([first, *rest])).rstrip()

    return "\n".join([line(headers), *(line(r) for r in rows)])


def render_text(verdict: Verdict, out: TextIO, *, colour: bool = False) -> None:
    """Write one run as a readable block: status line, signal, calibrants, ions, findings."""
    metrics = verdict.metrics
    fmt = metrics.format if metrics is not None else (_sniffed_format(verdict.run_file.path) or "?")
    status = _paint(str(verdict.status).upper(), _COLOURS.get(verdict.status), colour)
    # Names, reasons and messages come from outside (the file's name, its content, the config):
    # printable() keeps their control characters from reaching the terminal.
    out.write(f"{shown(verdict.run_file.path.name)}  {printable(fmt)}  {status}\n")
    if metrics is None:
        out.write(f"  {printable(str(verdict.error))}\n\n")
        return
    _render_signal(metrics, out)
    if metrics.calibrants:
        rows = [
            [
                printable(c.name),
                f"{c.mz:.6f}",
                _num(c.median_ppm, ".2f", signed=True),
                _num(c.mad_ppm, ".2f"),
                _num(c.p05_ppm, ".2f", signed=True),
                _num(c.p95_ppm, ".2f", signed=True),
                _num(c.found_fraction * 100, ".0f"),
                _num(c.slope_ppm_per_h, ".2f", signed=True),
            ]
            for c in metrics.calibrants
        ]
        out.write("  calibrants\n")
        headers = ["name", "m/z", "median ppm", "MAD", "p05", "p95", "found %", "slope ppm/h"]
        out.write(_table(headers, rows) + "\n")
    if metrics.mass_correction is not None:
        mc = metrics.mass_correction
        out.write(
            f"  mass correction  ppm = {mc.intercept_ppm:+.3f} {mc.slope_ppm_per_mz:+.6f} x m/z"
            f"  ({mc.calibrants_used} calibrants)\n"
        )
    if metrics.expected_ions:
        rows = [
            [
                printable(i.name),
                f"{i.mz:.6f}",
                "n/a" if i.found is None else "yes" if i.found else "NO",
                _num(None if i.apex_rt_s is None else i.apex_rt_s / 60.0, ".2f"),
                _num(i.apex_intensity, ".3g"),
                _num(i.ppm, ".2f", signed=True),
                _num(i.fwhm_s, ".1f"),
                f"{_num(i.m1_ratio, '.3f')}/{_num(i.m1_ratio_expected, '.3f')}",
            ]
            for i in metrics.expected_ions
        ]
        out.write("  expected ions\n")
        headers = [
            "name",
            "m/z",
            "found",
            "apex RT min",
            "intensity",
            "ppm",
            "FWHM s",
            "M+1/M obs/exp",
        ]
        out.write(_table(headers, rows) + "\n")
    if verdict.findings:
        out.write("  findings\n")
        for f in verdict.findings:
            sev = _paint(f"{f.severity!s:<8}", _SEVERITY_COLOURS.get(str(f.severity)), colour)
            out.write(f"    {sev}  {printable(f.check)}: {printable(f.message)}\n")
    for note in metrics.notes:
        out.write(f"  note: {printable(note)}\n")
    out.write("\n")


def _render_signal(metrics: RunMetrics, out: TextIO) -> None:
    s = metrics.signal
    rt = (
        f"{s.rt_start_s / 60:.2f}-{s.rt_end_s / 60:.2f} min"
        if s.rt_start_s is not None and s.rt_end_s is not None
        else "-"
    )
    out.write(
        f"  signal   MS1 {s.ms1_count}  MS2 {s.ms2_count}  RT {rt}"
        f"  TIC median {_num(s.tic_median, '.3g')}  BPI median {_num(s.bpi_median, '.3g')}\n"
    )
    dropouts = "-" if s.dropouts is None else str(s.dropouts)
    quartiles = "/".join(
        _num(None if q is None else q / 60.0, ".2f")
        for q in (s.tic_rt25_s, s.tic_rt50_s, s.tic_rt75_s)
    )
    out.write(
        f"           dropouts {dropouts} (longest {_num(s.longest_dropout_s, '.0f')} s)"
        f"  cycle {_num(s.cycle_time_s_median, '.2f')} s"
        f"  injection MS1 {_num(s.ms1_injection_time_ms_median, '.1f')} ms"
        f" / MS2 {_num(s.ms2_injection_time_ms_median, '.1f')} ms"
        f"  TIC 25/50/75 % at {quartiles} min\n"
    )
    if s.precursor_charges:
        charges = "  ".join(f"{'?' if c == 0 else c}: {n}" for c, n in s.precursor_charges)
        out.write(f"           MS2 precursor charges  {charges}\n")

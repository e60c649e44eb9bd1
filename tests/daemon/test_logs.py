"""Log set-up and event names: JSON lines with stable keys, rotation that loses nothing."""

from __future__ import annotations

import io
import json
import logging
import logging.handlers
import re
import time
import warnings
from pathlib import Path

import structlog

from watcher.daemon import logs

PACKAGE = Path(__file__).resolve().parents[2] / "watcher"
_CALL = re.compile(r"\blog\.(?:debug|info|warning|error|exception|critical)\(\s*\"([^\"]+)\"")


def test_every_logged_event_name_is_registered():
    """Every `log.<level>("name"` in the package uses a name listed in logs.EVENTS."""
    used: dict[str, str] = {}
    for path in PACKAGE.rglob("*.py"):
        for name in _CALL.findall(path.read_text(encoding="utf-8")):
            used.setdefault(name, path.name)
    assert used, "the grep found no log calls at all"
    missing = {name: where for name, where in used.items() if name not in logs.EVENTS}
    assert missing == {}


def test_event_names_are_noun_past_verb():
    """Names are lowercase dotted words (house style: noun.past_verb)."""
    bad = [n for n in logs.EVENTS if not re.fullmatch(r"[a-z_]+(\.[a-z_]+)+", n)]
    assert bad == []


def _lines(folder: Path) -> list[dict[str, object]]:
    out = []
    for path in sorted(folder.glob(f"{logs.LOG_FILE_NAME}*")):
        out += [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]
    return out


def _file_handler() -> logging.handlers.TimedRotatingFileHandler:
    return next(
        h
        for h in logging.getLogger().handlers
        if isinstance(h, logging.handlers.TimedRotatingFileHandler)
    )


def test_daemon_file_is_json_lines_with_context(tmp_path):
    """The daemon file: one JSON object a line with UTC timestamp, level, logger, event, context."""
    stream = io.StringIO()
    logs.configure_daemon(tmp_path, keep_days=3, stream=stream)
    log = structlog.get_logger("watcher.test")
    structlog.contextvars.bind_contextvars(run_id=42, file="QC_1.mzML")
    try:
        log.info("run.judged", status="ok", note="µ and a\nnewline")
        logging.getLogger("watchdog.observers").warning("from a library")
    finally:
        structlog.contextvars.clear_contextvars()
    _file_handler().flush()
    lines = _lines(tmp_path)
    assert [line["event"] for line in lines] == ["run.judged", "from a library"]
    first = lines[0]
    assert first["level"] == "info"
    assert first["logger"] == "watcher.test"
    assert first["run_id"] == 42
    assert first["file"] == "QC_1.mzML"
    assert str(first["timestamp"]).endswith("Z")
    assert first["note"] == "µ and a\nnewline"
    assert lines[1]["run_id"] == 42  # library records carry the bound context too
    # stderr is not a TTY here: JSON lines there as well (journald).
    assert json.loads(stream.getvalue().splitlines()[0])["event"] == "run.judged"


def test_library_levels_and_warnings(tmp_path):
    """apprise never below INFO (DEBUG leaks secrets), watchdog at WARNING, warnings logged."""
    logs.configure_daemon(tmp_path, keep_days=3, stream=io.StringIO())
    assert logging.getLogger("apprise").getEffectiveLevel() == logging.INFO
    assert logging.getLogger("watchdog").getEffectiveLevel() == logging.WARNING
    logging.getLogger("apprise").debug("JSON Payload: secret-body")
    with warnings.catch_warnings():
        warnings.simplefilter("always")
        warnings.warn("a reader complained", UserWarning, stacklevel=1)
    _file_handler().flush()
    text = "".join(p.read_text() for p in tmp_path.glob(f"{logs.LOG_FILE_NAME}*"))
    assert "secret-body" not in text
    assert "a reader complained" in text


def test_forced_rollover_loses_no_line(tmp_path):
    """Lines written around forced rollovers are all found in the kept files."""
    logs.configure_daemon(tmp_path, keep_days=10, stream=io.StringIO(), when="S")
    log = structlog.get_logger("watcher.test")
    handler = _file_handler()
    for i in range(20):
        log.info("scan.completed", seq=i)
        if i % 10 == 9:
            # Rotated names carry the second (when="S"): roll over once per second.
            second = int(time.time())
            while int(time.time()) == second:
                time.sleep(0.01)
            handler.doRollover()
    handler.flush()
    assert sorted(int(str(line["seq"])) for line in _lines(tmp_path)) == list(range(20))
    assert len(list(tmp_path.glob(f"{logs.LOG_FILE_NAME}*"))) >= 2


def test_cli_logs_to_stderr_only(tmp_path, monkeypatch):
    """CLI set-up writes no file: only the daemon owns the rotating log."""
    monkeypatch.chdir(tmp_path)
    stream = io.StringIO()
    logs.configure_cli(stream=stream)
    structlog.get_logger("watcher.cli").warning("config.rejected", reason="x")
    assert "config.rejected" in stream.getvalue()
    assert not any(isinstance(h, logging.FileHandler) for h in logging.getLogger().handlers)
    assert list(tmp_path.iterdir()) == []


def test_console_log_shows_control_characters_escaped(tmp_path, monkeypatch):
    """A file name with ESC and a newline logs as one console line with both escaped; the JSON
    file keeps JSON's own escaping (the value reads back unchanged)."""
    monkeypatch.chdir(tmp_path)
    stream = io.StringIO()
    logs.configure_cli(stream=stream)
    # no space or quote: the console renderer prints such a value as it is, without repr()
    name = "QC_\x1b[2J\x1b]0;title\x07.mzML"
    structlog.get_logger("watcher.cli").warning("run.unreadable", file=name)
    structlog.get_logger("watcher.cli").warning("run.unreadable", file="QC_a\nrun.failed b.mzML")
    out = stream.getvalue()
    assert "\x1b" not in out
    assert "\x07" not in out
    assert out.count("\n") == 2
    assert "file=QC_\\x1b[2J\\x1b]0;title\\x07.mzML" in out

    path = logs.configure_daemon(tmp_path / "logs", keep_days=3, stream=io.StringIO())
    structlog.get_logger("watcher.daemon").warning("run.unreadable", file=name)
    logging.getLogger().handlers[1].flush()
    (line,) = path.read_text().splitlines()
    assert json.loads(line)["file"] == name

"""`ionwarden demo`: the real daemon on the bundled runs as they arrive, alerts to a local receiver.

Nothing here is special-cased for the demo: it writes an ordinary config (the embedded default
plus a watch folder, a state folder and a ``json://`` channel), starts ``ionwarden run`` as a child
process, copies each run into the watch folder the way an instrument's export does (a temporary
name, then a rename), and prints every alert the local receiver gets. At the end it stops the
daemon with SIGTERM and writes the digest through the ``digest`` command.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from datetime import date, datetime, timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Any

import yaml

from watcher.errors import IonwardenError

if TYPE_CHECKING:
    import argparse

DEMO_URL_ENV = "IONWARDEN_DEMO_URL"  # an extra apprise URL to send the demo's alerts to
RUN_DEADLINE_S = 60.0  # one run from arrival to verdict; generous for a slow laptop


def demo_drop_dir() -> Path:
    """The bundled demo runs: inside the installed package, or beside it in a source checkout."""
    packaged = Path(str(resources.files("watcher"))) / "demo_drop"
    if (packaged / "TRUTH.json").is_file():
        return packaged
    checkout = Path(__file__).resolve().parents[2] / "demo_drop"
    if (checkout / "TRUTH.json").is_file():
        return checkout
    raise IonwardenError(
        "demo runs not found (demo_drop/TRUTH.json); regenerate them with "
        "`python -m synth.demo_night demo_drop`"
    )


class _Receiver(ThreadingHTTPServer):
    """A chat stand-in on 127.0.0.1: keeps and prints every apprise ``json://`` POST."""

    daemon_threads = True

    def __init__(self) -> None:
        super().__init__(("127.0.0.1", 0), _ReceiverHandler)
        self.messages: list[dict[str, Any]] = []
        self.lock = threading.Lock()

    @property
    def url(self) -> str:
        return f"json://127.0.0.1:{self.server_address[1]}/demo-alerts"


class _ReceiverHandler(BaseHTTPRequestHandler):
    server: _Receiver

    def do_POST(self) -> None:
        length = int(self.headers.get("Content-Length", "0"))
        body = self.rfile.read(length)
        try:
            payload = json.loads(body or b"{}")
        except ValueError:
            payload = {"title": "(not JSON)", "message": body.decode("utf-8", "replace")}
        with self.server.lock:
            self.server.messages.append(payload)
        self.send_response(200)
        self.end_headers()
        self.wfile.write(b"ok")
        _print_message(payload)

    def log_message(self, format: str, *args: Any) -> None:  # quiet: we print our own lines
        return


def _print_message(payload: dict[str, Any]) -> None:
    title = str(payload.get("title") or "").strip()
    body = str(payload.get("message") or "").strip()
    lines = [f"  >> ALERT  {title}"] + [f"  >>   {line}" for line in body.splitlines() if line]
    print("\n".join(lines), flush=True)


def write_demo_config(workdir: Path, channel_urls: list[str], *, settle_s: float) -> Path:
    """The embedded default config, pointed at the demo's folders and channels."""
    text = (resources.files("watcher") / "data" / "default.yaml").read_text(encoding="utf-8")
    data = yaml.safe_load(text)
    data["watch"]["folders"] = [str(workdir / "exports")]
    data["watch"]["settle_s"] = settle_s
    # The demo's truncated export never completes; report it after seconds, not the default hours.
    data["watch"]["max_wait_s"] = 5
    data["watch"]["stall_s"] = 5
    data["state_dir"] = str(workdir / "state")
    data["alerts"]["channels"] = [
        {"name": f"demo-{i}" if i else "demo-receiver", "url": url, "min_severity": "warning"}
        for i, url in enumerate(channel_urls)
    ]
    path = workdir / "demo.yaml"
    path.write_text(
        "# Written by `ionwarden demo` from the embedded default config.\n"
        + yaml.safe_dump(data, sort_keys=False),
        encoding="utf-8",
    )
    return path


def _judged(state_dir: Path) -> dict[str, str]:
    """file name -> status of every run the daemon has recorded so far."""
    from watcher.store import db, history

    if not (state_dir / db.DB_NAME).exists():
        return {}
    try:
        conn = db.connect(state_dir, readonly=True)
    except IonwardenError:
        return {}
    try:
        return {row.file_name: str(row.status) for row in history.recent_runs(conn, limit=1000)}
    except Exception:  # tables not created yet by the daemon
        return {}
    finally:
        conn.close()


def _arrive(src: Path, exports: Path, finished_at: datetime) -> None:
    """Copy a run in as an instrument export does: write under a temporary name, then rename.

    The file's mtime is set to when the instrument would have finished writing it, so formats
    that carry no acquisition time (mzXML, a cut-off export) still fall on the queue's evening.
    """
    part = exports / (src.name + ".part")
    shutil.copyfile(src, part)
    stamp = finished_at.timestamp()
    os.utime(part, (stamp, stamp))
    os.replace(part, exports / src.name)


def main(args: argparse.Namespace) -> int:
    if getattr(args, "facility", False):
        from watcher.cli import demo_facility

        return demo_facility.main(args)
    drop = demo_drop_dir()
    queue = json.loads((drop / "TRUTH.json").read_text())["queue"]
    workdir = (
        Path(args.workdir) if args.workdir else Path(tempfile.mkdtemp(prefix="ionwarden-demo-"))
    )
    exports = workdir / "exports"
    state_dir = workdir / "state"
    exports.mkdir(parents=True, exist_ok=True)

    receiver = _Receiver()
    threading.Thread(target=receiver.serve_forever, name="demo-receiver", daemon=True).start()
    urls = [receiver.url]
    extra = args.notify_url or os.environ.get(DEMO_URL_ENV)
    if extra:
        urls.append(extra)
    config_path = write_demo_config(workdir, urls, settle_s=0.5)

    print("ionwarden demo: an evening queue at the Larkfield Metabolomics Core (invented)")
    print(f"  instrument Kestrel-2 Q-TOF, {len(queue)} runs, work folder {workdir}")
    print(f"  alerts go to a local receiver at {receiver.url}" + (" and your URL" if extra else ""))
    print()

    log_path = workdir / "daemon.log"
    started = time.monotonic()
    with log_path.open("wb") as log_file:
        daemon = subprocess.Popen(
            [sys.executable, "-m", "watcher", "run", "-c", str(config_path)],
            stdout=log_file,
            stderr=subprocess.STDOUT,
            env={**os.environ, "PYTHONUNBUFFERED": "1"},
        )
        try:
            code = _feed(
                queue, drop, exports, state_dir, daemon, fast=args.fast, config=config_path
            )
            _wait_delivered(state_dir, receiver, daemon)
        finally:
            if daemon.poll() is None:
                daemon.send_signal(signal.SIGTERM)
                try:
                    daemon.wait(timeout=20)
                except subprocess.TimeoutExpired:
                    daemon.kill()
                    daemon.wait()
    receiver.shutdown()
    if code != 0:
        print(f"\nthe daemon did not finish the queue; its log: {log_path}", file=sys.stderr)
        return code

    print()
    day = _queue_day(queue)
    from watcher.cli import main as cli_main

    digest_path = state_dir / f"digest-{day.isoformat()}.html"
    cli_main(
        ["digest", "-c", str(config_path), "--date", day.isoformat(), "--out", str(digest_path)]
    )
    elapsed_s = time.monotonic() - started
    print()
    print(f"demo finished in {elapsed_s:.0f} s: {len(receiver.messages)} alert message(s) received")
    print(f"  health log   {state_dir / 'health'}")
    print(f"  digest       {digest_path}")
    print(f"  daemon log   {log_path}")
    print(f"  config used  {config_path}")
    return 0


def _queue_day(queue: list[dict[str, Any]]) -> date:
    return datetime.fromisoformat(queue[0]["acquired_at"]).date()


def _feed(
    queue: list[dict[str, Any]],
    drop: Path,
    exports: Path,
    state_dir: Path,
    daemon: subprocess.Popen[bytes],
    *,
    fast: bool,
    config: Path,
) -> int:
    """Hand the runs over one by one and print each verdict as the daemon records it; after
    the runs named in ``PEOPLE``, do what the person on call does (while the daemon runs)."""
    for item in queue:
        name = item["file"]
        stamp = datetime.fromisoformat(item["acquired_at"]).strftime("%H:%M")
        print(f"{stamp}  {name:26s} arrives  ({item['story']})", flush=True)
        acquired_at = datetime.fromisoformat(item["acquired_at"])
        _arrive(drop / name, exports, acquired_at + timedelta(seconds=item["duration_s"]))
        deadline = time.monotonic() + RUN_DEADLINE_S
        while True:
            status = _judged(state_dir).get(name)
            if status is not None:
                break
            if daemon.poll() is not None:
                print(f"the daemon exited with code {daemon.returncode}", file=sys.stderr)
                return 3
            if time.monotonic() > deadline:
                print(f"no verdict for {name} within {RUN_DEADLINE_S:.0f} s", file=sys.stderr)
                return 3
            time.sleep(0.1)
        print(f"       {'':26s} judged   {status.upper()}", flush=True)
        for command in PEOPLE.get(name, ()):
            _person(command, config)
        if not fast:
            time.sleep(0.3)
    return 0


# What the person on call does after these runs, as the commands they would type: the drift
# warning is acknowledged (the escalation that follows is still sent), and the re-calibration
# that ran before S05 is put on the record, so the digest's charts show why the drift stepped.
PEOPLE: dict[str, tuple[tuple[str, ...], ...]] = {
    "S04_plasma-A04.mzML": (
        (
            "ack",
            "--check",
            "calibration drift",
            "--by",
            "night operator",
            "--note",
            "re-calibration queued after the next QC",
        ),
    ),
    "S05_plasma-A05.mzML": (
        (
            "note",
            "queued re-calibration ran",
            "--kind",
            "calibration",
            "--at",
            "2026-11-27T20:52:00+01:00",
            "--by",
            "night operator",
        ),
    ),
}


def _person(command: tuple[str, ...], config: Path) -> None:
    from watcher.cli import main as cli_main

    shown = " ".join(f'"{part}"' if " " in part else part for part in command)
    print(f"       {'':26s} $ ionwarden {shown}", flush=True)
    code = cli_main([*command, "-c", str(config)])
    if code != 0:
        print(f"       {'':26s} (exit {code})", flush=True)


def _wait_delivered(state_dir: Path, receiver: _Receiver, daemon: subprocess.Popen[bytes]) -> None:
    """Give the delivery worker a moment to empty the outbox before the daemon is stopped."""
    from watcher.store import db

    deadline = time.monotonic() + 15.0
    while time.monotonic() < deadline and daemon.poll() is None:
        with contextlib.suppress(Exception):
            conn = db.connect(state_dir, readonly=True)
            try:
                pending = conn.execute(
                    "SELECT count(*) FROM deliveries WHERE status NOT IN ('delivered', 'abandoned')"
                ).fetchone()[0]
            finally:
                conn.close()
            if pending == 0:
                return
        time.sleep(0.2)

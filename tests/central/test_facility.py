"""Three daemons (three instruments, three watch folders) publish into one real PostgreSQL
server; ``status --all`` shows all three; the server killed for a while loses no run and no
alert, and a daemon killed with SIGKILL mid-publish duplicates nothing.

Everything is real: the daemons are ``ionwarden run`` subprocesses (tests/helpers/daemon.py),
alerts go to an HTTP receiver on 127.0.0.1 through apprise json://, the server is a throwaway
cluster (tests/helpers/postgres.py). Waits are deadlines on what the server and the receiver
hold.
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any

import psycopg
import pytest

import synth
from tests.helpers.cli import run_cli
from tests.helpers.daemon import Lab
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from collections.abc import Iterator
    from pathlib import Path

    from tests.helpers.postgres import Postgres
    from tests.helpers.receiver import Receiver

NAMES = ("Kestrel-2 Q-TOF", "Heron-5 QqQ", "Merlin-3 TOF")


@pytest.fixture(scope="module")
def template(tmp_path_factory: pytest.TempPathFactory) -> bytes:
    path = tmp_path_factory.mktemp("template") / "tiny.mzML"
    synth.write_mzml(
        path,
        synth.RunSpec(duration_s=10, ms2_per_cycle=0, background_peaks=20, seed=7),
        indexed=False,
    )
    return path.read_bytes()


def _checks() -> list[dict[str, Any]]:
    # A TIC below 1e14 holds for every run here: files named LOW_* always raise the warning
    # and DIM_* the critical, so the test knows which runs alert without measured values.
    return [
        {
            "name": "signal floor",
            "metric": "signal.tic_median",
            "applies_to": ["LOW_*"],
            "warning": {"below": 1e14},
        },
        {
            "name": "signal gone",
            "metric": "signal.tic_median",
            "applies_to": ["DIM_*"],
            "critical": {"below": 1e14},
        },
    ]


@pytest.fixture
def labs(tmp_path: Path, template: bytes) -> Iterator[list[Lab]]:
    out = []
    for i, _ in enumerate(NAMES):
        root = tmp_path / f"lab{i}"
        (root / "exports").mkdir(parents=True)
        out.append(
            Lab(
                root=root,
                exports=root / "exports",
                state=root / "state",
                config=root / "lab.yaml",
                template=template,
            )
        )
    yield out
    for lab in out:
        for d in lab.procs:
            d.close()


def _configure(lab: Lab, name: str, url: str, receiver: Receiver) -> None:
    lab.write_config(
        instrument={"name": name, "timezone": "UTC"},
        central={"url": url, "retry_first_wait": "1s", "retry_max_wait": "2s"},
        checks=_checks(),
        alerts={
            "channels": [{"name": "floor", "url": receiver.url(), "min_severity": "warning"}],
            "retry_first_wait": "1s",
            "retry_max_wait": "2s",
        },
    )


def _central_runs(url: str) -> list[tuple[str, str, str]]:
    try:
        with psycopg.connect(url, autocommit=True, connect_timeout=2) as conn:
            return conn.execute(
                "SELECT instrument, file_name, status FROM runs ORDER BY instrument, file_name"
            ).fetchall()
    except psycopg.Error:
        return []


def _count(url: str, sql: str) -> int:
    with psycopg.connect(url, autocommit=True) as conn:
        row = conn.execute(sql).fetchone()  # type: ignore[arg-type]
        return int(row[0]) if row else 0


def test_three_daemons_one_server_outage_and_kill(
    labs: list[Lab], pg: Postgres, receiver: Receiver, tmp_path: Path
) -> None:
    """The done-when of the facility: three instruments in one store, nothing lost or doubled
    by a server outage or a daemon's SIGKILL, and alerts on time while the server is down."""
    database = pg.new_database()
    url = pg.url(database)
    # The third instrument connects over TCP as 'lab' with a password from its environment.
    secret_url = pg.tcp_url(database) + "?password=${CENTRAL_PW}"
    env = {"CENTRAL_PW": pg.password}
    # One role for every daemon, as a facility sets it up (the first to connect makes the
    # tables, so they are that role's); the test reads as the superuser.
    socket_url = pg.url(database, user="lab")
    for i, (lab, name) in enumerate(zip(labs, NAMES, strict=True)):
        _configure(lab, name, secret_url if i == 2 else socket_url, receiver)
    daemons = [lab.start(env=env) for lab in labs]

    for i, lab in enumerate(labs):
        lab.drop(f"QC_{i}_01.mzML", 100 * i + 1)
        lab.drop(f"LOW_{i}_02.mzML", 100 * i + 2)
        lab.drop(f"S_{i}_03.mzML", 100 * i + 3)
    wait_for(lambda: len(_central_runs(url)) == 9, 60, "9 runs in the central store")
    receiver.wait_for(3, timeout_s=30)  # one warning per instrument (LOW_*)

    status = run_cli("status", "-c", labs[0].config, "--all", "--json")
    assert status.returncode == 1, status.stderr  # open problems: exit 1
    state = json.loads(status.stdout)
    assert sorted(i["instrument"] for i in state["instruments"]) == sorted(NAMES)
    for inst in state["instruments"]:
        assert inst["runs"] == 3
        assert [p["check"] for p in inst["open_problems"]] == ["signal floor"]
        assert inst["worst_open"] == "warning"
    text = run_cli("status", "-c", labs[1].config, "--all")
    for name in NAMES:
        assert name in text.stdout
    one = run_cli("status", "-c", labs[0].config, "--instrument", NAMES[2], "--json")
    assert [i["instrument"] for i in json.loads(one.stdout)["instruments"]] == [NAMES[2]]

    # The server dies. Runs keep being judged and new alerts arrive while it is down.
    pg.kill()
    for i, lab in enumerate(labs):
        lab.drop(f"QC_{i}_04.mzML", 100 * i + 4)
        lab.drop(f"LOW_{i}_05.mzML", 100 * i + 5)  # same alert, still open: no new message
        lab.drop(f"S_{i}_06.mzML", 100 * i + 6)
        lab.drop(f"DIM_{i}_07.mzML", 100 * i + 7)  # a new critical alert per instrument
    for lab in labs:
        lab.wait_runs(7, timeout_s=60)
    bodies = receiver.wait_for(6, timeout_s=30)
    # the title names the instrument, the status and the run (watcher.notify.alert_text)
    critical = sorted(str(b.get("title")) for b in bodies if "CRITICAL" in str(b.get("title")))
    assert critical == sorted(f"{name}: CRITICAL DIM_{i}_07.mzML" for i, name in enumerate(NAMES))
    assert pg.postmaster_pid() is None  # all of it with the server down
    assert all(_central_runs(url) == [] for _ in range(1))  # unreachable: nothing to read

    pg.start()
    wait_for(lambda: len(_central_runs(url)) == 21, 60, "21 runs after the server returned")
    got = _central_runs(url)
    assert len({(r[0], r[1]) for r in got}) == 21  # every run once
    for i, name in enumerate(NAMES):
        files = sorted(r[1] for r in got if r[0] == name)
        assert len(files) == 7
        assert all(f"_{i}_" in f for f in files)
    # LOW_* and DIM_* open per instrument, each raised once
    assert _count(url, "SELECT count(*) FROM open_alerts") == 6
    assert _count(url, "SELECT count(*) FROM alert_events WHERE action = 'raised'") == 6

    # SIGKILL a daemon while it publishes a burst, start it again: every run there once.
    for n in range(20):
        labs[0].drop(f"B_{n:02d}.mzML", 1000 + n)
    wait_for(lambda: any(r[1].startswith("B_") for r in _central_runs(url)), 60, "burst publishing")
    daemons[0].kill9()
    labs[0].start(env=env)
    wait_for(lambda: len(_central_runs(url)) == 41, 90, "41 runs after the restart")
    got = _central_runs(url)
    assert len(got) == len({(r[0], r[1]) for r in got}) == 41
    burst = [r for r in got if r[1].startswith("B_")]
    assert len(burst) == 20
    # Every delivered message reaches the central store too (the scan runs every 2 s).
    wait_for(
        lambda: _count(url, "SELECT count(*) FROM messages WHERE status = 'delivered'") >= 3,
        30,
        "the delivered alerts in the central store",
    )
    # The password reached no log, no status output.
    for lab in labs:
        for d in lab.procs:
            assert pg.password not in d.stderr()
        for log_file in (lab.state / "logs").glob("*"):
            assert pg.password not in log_file.read_text(errors="replace")
    assert pg.password not in run_cli("status", "-c", labs[2].config, "--all").stdout

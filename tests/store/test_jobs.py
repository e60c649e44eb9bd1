"""The job table on a real SQLite file: identities, state changes, crash recovery, duplicates."""

from __future__ import annotations

from pathlib import Path

import pytest

from watcher.store import db, jobs


@pytest.fixture
def conn(tmp_path):
    c = db.connect(tmp_path / "state", daemon=True)
    yield c
    c.close()


def test_enqueue_is_once_per_identity(conn):
    """The same (path, size, mtime_ns) gets one row; a new size at the same path a second one."""
    p = Path("/x/QC_1.mzML")
    with db.write(conn):
        first = jobs.enqueue(conn, p, 10, 1, 0.0)
        again = jobs.enqueue(conn, p, 10, 1, 1.0)
        changed = jobs.enqueue(conn, p, 11, 2, 2.0)
    assert first is not None
    assert again is None
    assert changed is not None
    assert changed != first
    assert jobs.counts(conn)["queued"] == 2


def test_claim_oldest_first_and_requeue_after_crash(tmp_path):
    """Claims go oldest first; rows left 'measuring' by a dead process return to 'queued'."""
    state = tmp_path / "state"
    c1 = db.connect(state, daemon=True)
    with db.write(c1):
        jobs.enqueue(c1, Path("/x/new.mzML"), 1, 1, 20.0)
        jobs.enqueue(c1, Path("/x/old.mzML"), 1, 1, 10.0)
    with db.write(c1):
        job = jobs.claim_next(c1, 30.0)
    assert job is not None
    assert job.path.name == "old.mzML"
    c1.close()  # the process "dies" with the job measuring
    c2 = db.connect(state, daemon=True)
    assert jobs.counts(c2)["measuring"] == 1
    with db.write(c2):
        assert jobs.requeue_interrupted(c2, 40.0) == 1
    with db.write(c2):
        again = jobs.claim_next(c2, 41.0)
    assert again is not None
    assert again.id == job.id
    assert again.attempts == 1  # the row remembers it was tried once before
    c2.close()


def test_finish_keeps_run_id_and_hash(conn):
    """A finished job stores run id and hash; the newest judged runs come first."""
    with db.write(conn):
        for n, name in enumerate(["a.mzML", "b.mzML"]):
            job_id = jobs.enqueue(conn, Path("/x") / name, 1, 1, float(n))
            assert job_id is not None
            jobs.claim_next(conn, 1.0)
            jobs.finish(
                conn,
                job_id,
                2.0 + n,
                state=jobs.JobState.DONE,
                outcome="ok",
                run_id=7 + n,
                sha256=f"h{n}",
            )
    assert jobs.recent_judged(conn) == [8, 7]
    job = jobs.get(conn, 1)
    assert job is not None
    assert (job.sha256, job.state, job.run_id) == ("h0", jobs.JobState.DONE, 7)
    assert jobs.claim_next(conn, 3.0) is None


def test_same_content_finds_earlier_done_job(conn):
    """Identical content under another name is found by its hash once the first is done."""
    with db.write(conn):
        a = jobs.enqueue(conn, Path("/x/a.mzML"), 5, 1, 0.0)
        b = jobs.enqueue(conn, Path("/x/copy_of_a.mzML"), 5, 2, 1.0)
        assert a is not None
        assert b is not None
        assert jobs.same_content(conn, "h1", b) is None  # a is not done yet
        jobs.finish(conn, a, 2.0, state=jobs.JobState.DONE, outcome="ok", run_id=1, sha256="h1")
        twin = jobs.same_content(conn, "h1", b)
    assert twin is not None
    assert twin.id == a


def test_incomplete_flag_and_daemon_state(conn):
    """A never-completed file keeps its give-up text; small daemon state survives as key/value."""
    with db.write(conn):
        job_id = jobs.enqueue(conn, Path("/x/a.mzML"), 5, 1, 0.0, incomplete="incomplete: x")
        jobs.set_state(conn, "heartbeat.missed", "1")
        jobs.set_state(conn, "heartbeat.missed", "0")
    assert job_id is not None
    job = jobs.get(conn, job_id)
    assert job is not None
    assert job.incomplete == "incomplete: x"
    assert jobs.get_state(conn, "heartbeat.missed") == "0"
    assert jobs.get_state(conn, "nothing") is None
    assert jobs.last_arrival_s(conn) == 0.0

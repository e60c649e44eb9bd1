"""Events, acknowledgements and quiet times in the digest, from a real store: the charts carry
each event as a labelled vertical mark (found by its colour in the PNG's pixels), the page and
the summary list them, and headless Chromium renders the page."""

from __future__ import annotations

import io
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from matplotlib.image import imread

from tests.helpers import browser
from tests.helpers.records import make_finding, make_metrics
from watcher.config import Check, Condition, Config, Instrument, IonSpec
from watcher.notify import digest as digest_mod
from watcher.notify import plots
from watcher.records import AlertState, RunFile, Severity, Status, Verdict
from watcher.store import controls, db, history, outbox

CONFIG = Config(
    instrument=Instrument(name="Kestrel-2 Q-TOF", timezone="Europe/Oslo"),
    calibrants=(IonSpec(name="siloxane-445", mz=445.120025, search_ppm=30),),
    checks=(
        Check(
            name="calibration drift",
            metric="calibrant.*.median_ppm",
            warning=Condition(outside=(-3.0, 3.0)),
        ),
    ),
)
DAY = date(2026, 3, 10)
START = datetime(2026, 3, 10, 0, 30, tzinfo=UTC)  # 01:30 in Oslo (CET)
NOTE_AT = datetime(2026, 3, 10, 7, 0, tzinfo=UTC)  # 08:00 in Oslo


def _mark_columns(png: bytes) -> list[int]:
    """x pixel columns where the mark colour runs down most of the plot's height."""
    rgb = imread(io.BytesIO(png))[:, :, :3]
    target = np.array([int(plots.MARK_COLOUR[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    hit = np.all(np.abs(rgb - target) < 0.04, axis=2)
    tall = np.flatnonzero(hit.sum(axis=0) > rgb.shape[0] * 0.4)
    # adjacent columns are one line drawn more than a pixel wide
    groups: list[int] = []
    for x in tall:
        if not groups or x - groups[-1] > 2:
            groups.append(int(x))
    return groups


def test_an_event_is_a_vertical_line_at_its_time() -> None:
    """No mark: no column of the mark colour. Marks at the first and last run's time: two
    columns, left and right, in time order."""
    points = [(START + timedelta(hours=i), float(i)) for i in range(6)]
    bare = plots.series({"TIC": points}, title="t", ylabel="y")
    assert _mark_columns(bare) == []
    marked = plots.series(
        {"TIC": points},
        title="t",
        ylabel="y",
        marks=[(points[0][0], "column: replaced"), (points[-1][0], "source: cleaned")],
    )
    left, right = _mark_columns(marked)
    assert left < right
    lj = plots.levey_jennings(points, mean=2.0, sd=1.0, title="t", marks=[(points[2][0], "x")])
    assert len(_mark_columns(lj)) == 1


@pytest.fixture
def state(tmp_path: Path) -> Path:
    """Eight runs on 10 March (Oslo), a column change at 08:00 local, an acknowledged alert."""
    state_dir = tmp_path / "state"
    conn = db.connect(state_dir, daemon=True)
    finding = make_finding(Severity.WARNING, value=3.6)
    with db.write(conn):
        for i in range(8):
            at = START + timedelta(hours=i)
            history.record_verdict(
                conn,
                Verdict(
                    run_file=RunFile(path=Path(f"/x/QC_{i:03d}.mzML"), size=10, mtime_ns=i),
                    status=Status.WARNING if i == 7 else Status.OK,
                    acquired_at=at,
                    metrics=make_metrics(siloxane_ppm=3.6 if i == 7 else 0.1 * i, acquired_at=at),
                    findings=(finding,) if i == 7 else (),
                    judged_at=at + timedelta(minutes=5),
                ),
            )
        controls.add_note(
            conn,
            instrument="Kestrel-2 Q-TOF",
            at=NOTE_AT,
            kind="column",
            text="C18 column replaced (lot 4471)",
            reset_baselines=True,
            by="dana",
            recorded_at_s=NOTE_AT.timestamp(),
        )
        raised_s = (START + timedelta(hours=7, minutes=5)).timestamp()
        outbox.save_alert(
            conn,
            instrument="Kestrel-2 Q-TOF",
            check=finding.check,
            subject=finding.subject,
            channel="lab-chat",
            state=AlertState(
                severity=Severity.WARNING,
                raised_at_s=raised_s,
                last_sent_at_s=raised_s,
                finding=finding,
                acked_at_s=raised_s + 600,
            ),
            run_file="QC_007.mzML",
        )
        controls.add_ack(
            conn,
            at_s=raised_s + 600,
            instrument="Kestrel-2 Q-TOF",
            check=finding.check,
            subject=finding.subject,
            severity=Severity.WARNING,
            raised_at_s=raised_s,
            by="dana",
            note="recalibrating",
        )
        controls.add_silence(
            conn,
            instrument="Kestrel-2 Q-TOF",
            check=None,
            subject=None,
            reason="source cleaning",
            by="lee",
            start_s=(START + timedelta(hours=7)).timestamp(),
            end_s=(START + timedelta(hours=7, minutes=30)).timestamp(),
        )
    conn.close()
    return state_dir


def test_the_digest_lists_and_draws_the_days_controls(state: Path) -> None:
    conn = db.connect(state, readonly=True)
    built = digest_mod.build_digest(conn, CONFIG, DAY)
    conn.close()
    (event,) = built.controls.events
    assert (event.at.strftime("%H:%M"), event.kind) == ("08:00", "column")  # Oslo is UTC+1
    text = digest_mod.render_text(built)
    assert "event: 08:00 column: C18 column replaced (lot 4471) (dana, baselines restarted)" in text
    acked = "acknowledged: 08:45 calibration drift, calibrant.siloxane-445.median_ppm (warning)"
    assert f"{acked} by dana: recalibrating" in text
    assert "quiet: silence 1, 2026-03-10 08:30 to 2026-03-10 09:00" in text
    # the run judged at 08:35 was held back by the silence: shown, and marked
    assert "[silenced]" in text
    assert built.open_problems[0].acked is not None
    assert built.open_problems[0].acked.startswith("acknowledged by dana at 2026-03-10 08:45")
    # every chart of the day carries the event's mark
    assert built.charts
    assert all(len(_mark_columns(c.png)) == 1 for c in built.charts)


@pytest.mark.skipif(browser.CHROMIUM is None, reason="chromium is not installed (CI installs it)")
def test_the_page_shows_the_events_in_chromium(state: Path, tmp_path: Path) -> None:
    conn = db.connect(state, readonly=True)
    page = tmp_path / "digest.html"
    page.write_text(digest_mod.render_html(digest_mod.build_digest(conn, CONFIG, DAY)))
    conn.close()
    dom = browser.dump_dom(page, tmp_path / "p1")
    assert "Uncaught" not in dom.stderr
    assert dom.stdout.count('<tr class="event">') == 1
    assert "C18 column replaced (lot 4471)" in dom.stdout
    assert '<li class="ack">' in dom.stdout
    assert "recalibrating" in dom.stdout
    assert '<li class="quiet">silence 1:' in dom.stdout
    assert "(silenced)" in dom.stdout

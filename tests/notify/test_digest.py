"""The daily digest from real history rows: summary text, HTML content, and headless Chromium."""

from __future__ import annotations

import argparse
import base64
import dataclasses
import io
import re
from contextlib import redirect_stdout
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from tests.helpers import browser
from watcher.cli import digest as cmd_digest
from watcher.config import (
    BaselineSpec,
    Check,
    Condition,
    Config,
    ExpectedIon,
    Instrument,
    IonSpec,
)
from watcher.notify import digest as digest_mod
from watcher.records import (
    CalibrantDrift,
    ExpectedIonResult,
    Finding,
    RunFile,
    RunMetrics,
    Severity,
    SignalMetrics,
    Status,
    Verdict,
)
from watcher.store import db, history

# m/z from tests/data/check-ions.tsv (molmass column).
SILOXANE_MZ = 445.120025
CAFFEINE_MZ = 195.087652

CONFIG = Config(
    instrument=Instrument(name="Kestrel-2 Q-TOF", timezone="Europe/Oslo"),
    calibrants=(IonSpec(name="siloxane-445", mz=SILOXANE_MZ, search_ppm=30),),
    expected_ions=(
        ExpectedIon(
            ion=IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H"),
            rt_window_min=(2.0, 4.0),
        ),
    ),
    checks=(
        Check(
            name="calibration drift",
            metric="calibrant.siloxane-445.median_ppm",
            warning=Condition(outside=(-3.0, 3.0)),
            baseline=BaselineSpec(mean=0.0, sd=1.0),
        ),
    ),
)

DAY = date(2026, 3, 10)


def _verdict(i: int, at: datetime, ppm: float, *, findings: tuple[Finding, ...] = ()) -> Verdict:
    metrics = RunMetrics(
        file=f"QC_{i:03d}.mzML",
        format="mzML",
        acquired_at=at,
        signal=SignalMetrics(
            ms1_count=600,
            ms2_count=0,
            rt_start_s=0.0,
            rt_end_s=720.0,
            tic_median=2.0e7 * (1 - 0.05 * i),
            bpi_median=1.0e6,
            dropouts=0,
            longest_dropout_s=0.0,
        ),
        calibrants=(
            CalibrantDrift(
                name="siloxane-445",
                mz=SILOXANE_MZ,
                median_ppm=ppm,
                mad_ppm=0.3,
                p05_ppm=ppm - 0.5,
                p95_ppm=ppm + 0.5,
                found_fraction=1.0,
                median_intensity=4.0e4,
                slope_ppm_per_h=0.0,
            ),
        ),
        expected_ions=(
            ExpectedIonResult(
                name="caffeine",
                mz=CAFFEINE_MZ,
                found=True,
                apex_rt_s=180.0 + i,
                apex_intensity=3.0e6,
                ppm=ppm,
                fwhm_s=6.0,
                m1_ratio=0.10,
                m1_ratio_expected=0.1032,
            ),
        ),
    )
    status = Status.WARNING if findings else Status.OK
    return Verdict(
        run_file=RunFile(path=Path(f"/exports/QC_{i:03d}.mzML"), size=10, mtime_ns=i),
        status=status,
        acquired_at=at,
        metrics=metrics,
        findings=findings,
        judged_at=at + timedelta(minutes=13),
    )


@pytest.fixture(scope="module")
def state(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A state database with 8 QC runs on 10 March (Oslo), the last one drifting to +3.8 ppm."""
    state_dir = tmp_path_factory.mktemp("state")
    conn = db.connect(state_dir, daemon=True)
    start = datetime(2026, 3, 10, 0, 30, tzinfo=UTC)
    with db.write(conn):
        for i in range(8):
            ppm = [0.2, -0.4, 0.6, 0.1, 1.2, 1.9, 2.7, 3.8][i]
            findings: tuple[Finding, ...] = ()
            if ppm > 3:
                findings = (
                    Finding(
                        check="calibration drift",
                        severity=Severity.WARNING,
                        metric="calibrant.siloxane-445.median_ppm",
                        subject="calibrant.siloxane-445.median_ppm",
                        message="siloxane-445 is +3.8 ppm off",
                        value=ppm,
                        limit="outside [-3, 3]",
                        rule="limit",
                    ),
                )
            history.record_verdict(
                conn, _verdict(i, start + timedelta(hours=2 * i), ppm, findings=findings)
            )
    conn.close()
    return state_dir


def test_build_digest_counts_and_findings(state: Path) -> None:
    """8 runs, 1 warning, the finding row, calibrant mean of the 8 ppm values (sum 10.1 / 8)."""
    conn = db.connect(state, readonly=True)
    d = digest_mod.build_digest(conn, CONFIG, DAY)
    conn.close()
    assert d.run_count == 8
    assert d.by_status == {"ok": 7, "warning": 1}
    assert [(f.file, f.check, f.value) for f in d.findings] == [
        ("QC_007.mzML", "calibration drift", "+3.8 ppm")  # the alerts' sign and 0.1 ppm
    ]
    (cal,) = d.calibrants
    assert cal.mean_ppm == pytest.approx(10.1 / 8)
    assert cal.baseline == "fixed by check 'calibration drift'"
    assert [c.kind for c in d.charts] == [
        "levey-jennings",
        "tic",
        "ion-intensity",
        "ion-rt",
        "status",
    ]
    for chart in d.charts:
        assert chart.png.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (PNG spec, RFC 2083)
    text = digest_mod.render_text(d)
    assert "runs: 8 (ok 7, notice 0, warning 1, critical 0, unreadable 0)" in text
    assert "QC_007.mzML warning calibration drift, siloxane-445: +3.8 ppm" in text
    # The verdict comes first: the worst run and the run that needs a decision.
    assert text.splitlines()[1].startswith("worst run: WARNING; 1 run(s) need a decision")


def test_day_bounds_follow_the_local_day() -> None:
    """10 March in Oslo is 09 March 23:00 to 10 March 23:00 UTC (CET = UTC+1, IANA tzdata)."""
    start, end = digest_mod.day_bounds(DAY, "Europe/Oslo")
    assert start == datetime(2026, 3, 9, 23, 0, tzinfo=UTC)
    assert end == datetime(2026, 3, 10, 23, 0, tzinfo=UTC)


def test_html_is_self_contained(state: Path) -> None:
    """The page has inline PNGs only: no scripts, no external src or href."""
    conn = db.connect(state, readonly=True)
    page = digest_mod.render_html(digest_mod.build_digest(conn, CONFIG, DAY))
    conn.close()
    assert "<script" not in page
    assert not re.search(r'(src|href)="(?!data:)', page)
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', page)
    assert len(images) == 5
    assert all(base64.b64decode(i).startswith(b"\x89PNG") for i in images)


def test_digest_command_prints_summary_and_writes_html(state: Path, tmp_path: Path) -> None:
    """ionwarden digest --date prints the summary and the HTML path, exit 0."""
    cfg = tmp_path / "lab.yaml"
    cfg.write_text(
        "instrument: {name: Kestrel-2 Q-TOF, timezone: Europe/Oslo}\n"
        f"state_dir: {state}\n"
        "calibrants:\n  - {name: siloxane-445, mz: 445.120025, search_ppm: 30}\n"
    )
    out_html = tmp_path / "d.html"
    buf = io.StringIO()
    with redirect_stdout(buf):
        code = cmd_digest.main(
            argparse.Namespace(config=str(cfg), date="2026-03-10", out=str(out_html))
        )
    assert code == 0
    assert "Kestrel-2 Q-TOF: digest for 2026-03-10" in buf.getvalue()
    assert f"HTML: {out_html}" in buf.getvalue()
    assert "siloxane-445" in out_html.read_text()
    with redirect_stdout(io.StringIO()):
        bad = cmd_digest.main(argparse.Namespace(config=str(cfg), date="10/03/2026", out=None))
    assert bad == 2


@pytest.mark.skipif(browser.CHROMIUM is None, reason="chromium is not installed (CI installs it)")
def test_digest_html_opens_in_headless_chromium(state: Path, tmp_path: Path) -> None:
    """Chromium renders the page without console errors; its DOM has the names, rows, images."""
    conn = db.connect(state, readonly=True)
    page = tmp_path / "digest.html"
    page.write_text(digest_mod.render_html(digest_mod.build_digest(conn, CONFIG, DAY)))
    conn.close()
    shot = tmp_path / "shot.png"
    dom = browser.dump_dom(page, tmp_path / "p1")
    png = browser.screenshot(page, shot, tmp_path / "p2")
    assert "Uncaught" not in dom.stderr
    assert "ERROR:CONSOLE" not in dom.stderr
    assert "siloxane-445" in dom.stdout
    assert dom.stdout.count('<tr class="finding">') == 1
    assert "QC_007.mzML" in dom.stdout
    assert "+3.8 ppm" in dom.stdout  # the finding's value as the alert line gives it
    assert (
        len(re.findall(r'<img [^>]*src="data:image/png;base64,[A-Za-z0-9+/=]{100,}', dom.stdout))
        == 5
    )
    assert png.startswith(b"\x89PNG")


@pytest.mark.parametrize(
    ("text", "metric", "shown"),
    [
        ("6", "calibrant.siloxane-445.median_ppm", "6 ppm"),
        ("outside [-5, 5]", "calibrant.siloxane-445.median_ppm", "outside [-5, 5] ppm"),
        ("0.8", "calibrant.siloxane-445.slope_ppm_per_h", "0.8 ppm/h"),
        ("92", "signal.longest_dropout_s", "92 s"),
        ("0.5", "expected_ions.found_fraction", "0.5"),
        ("missing", "calibrant.siloxane-445.median_ppm", "missing"),
        ("12 ppm", "calibrant.x.median_ppm", "12 ppm"),
        ("3e+05", "signal.tic_median", "3e+05"),
    ],
)
def test_finding_values_carry_the_metric_unit(text: str, metric: str, shown: str) -> None:
    """The digest's value and limit cells name the unit of the metric path (house unit suffixes)."""
    # Units from the metric-path suffixes documented in README "Metric paths for checks".
    assert digest_mod.with_unit(text, metric) == shown


@pytest.mark.parametrize(
    ("values", "is_log"),
    [([7e5, 8e5, 1.05e6], False), ([1e4, 2e5, 1e6], True), ([0.0, 1e6], False), ([], False)],
)
def test_log_axis_only_over_a_decade(values: list[float], is_log: bool) -> None:
    """Intensity charts use a log axis only when the values span a factor of ten or more."""
    from watcher.notify.plots import wants_log_axis

    assert wants_log_axis(values) is is_log


def test_levey_jennings_lines_come_from_the_check_with_the_lab_set_target(state: Path) -> None:
    """A limits-only check listed first does not hide the Westgard check's lab-set mean and SD."""
    # Levey-Jennings charts draw the mean and +-2/3 SD the Westgard rules judge against
    # (Westgard, Barry, Hunt, Groth, Clin. Chem. 27 (1981) 493-501).
    limits_only = Check(
        name="calibration drift",
        metric="calibrant.*.median_ppm",
        warning=Condition(outside=(-3.0, 3.0)),
    )
    rules = Check(
        name="siloxane QC rules",
        metric="calibrant.siloxane-445.median_ppm",
        westgard=("1-3s",),
        baseline=BaselineSpec(mean=0.5, sd=0.8),
    )
    config = dataclasses.replace(CONFIG, checks=(limits_only, rules))
    conn = db.connect(state, readonly=True)
    d = digest_mod.build_digest(conn, config, DAY)
    conn.close()
    (cal,) = d.calibrants
    assert cal.baseline == "fixed by check 'siloxane QC rules'"


def test_levey_jennings_centre_and_spread_are_the_rules_baseline(tmp_path: Path) -> None:
    """Without a lab-set target the chart's lines are the rules' robust baseline of the runs
    before the day: median and 1.4826 x MAD (MAD scaled to estimate a normal SD; NIST/SEMATECH
    e-Handbook of Statistical Methods, section 1.3.5.6) of the accepted runs only, with the
    check's ``runs`` window and ``min_runs`` floor."""
    check = Check(
        name="calibration drift",
        metric="calibrant.*.median_ppm",
        warning=Condition(z_outside=(-2.0, 2.0)),
        baseline=BaselineSpec(runs=6, min_runs=4),
    )
    config = dataclasses.replace(CONFIG, checks=(check,))
    before = datetime(2026, 3, 9, 8, 0, tzinfo=UTC)
    # 8 accepted runs the day before (the window keeps the last 6) and one rejected outlier.
    accepted_ppm = [9.0, 9.0, 0.4, -0.2, 1.1, 0.7, 0.1, 0.9]
    state_dir = tmp_path / "state"
    conn = db.connect(state_dir, daemon=True)
    with db.write(conn):
        for i, ppm in enumerate(accepted_ppm):
            history.record_verdict(conn, _verdict(i, before + timedelta(minutes=30 * i), ppm))
        rejected = dataclasses.replace(
            _verdict(50, before + timedelta(hours=5), 25.0), status=Status.CRITICAL
        )
        history.record_verdict(conn, rejected)
        history.record_verdict(conn, _verdict(60, datetime(2026, 3, 10, 9, 0, tzinfo=UTC), 0.3))
    d = digest_mod.build_digest(conn, config, DAY)
    window = np.array(accepted_ppm[-6:])
    centre = float(np.median(window))
    sd = 1.4826 * float(np.median(np.abs(window - centre)))
    (cal,) = d.calibrants
    assert cal.centre_ppm == pytest.approx(centre)
    assert cal.sd_ppm == pytest.approx(sd)
    assert "last 6 accepted runs" in cal.baseline

    # With fewer accepted runs before the day than min_runs, the rules had no baseline: no lines.
    short = dataclasses.replace(check, baseline=BaselineSpec(runs=6, min_runs=20))
    d2 = digest_mod.build_digest(conn, dataclasses.replace(CONFIG, checks=(short,)), DAY)
    conn.close()
    (cal2,) = d2.calibrants
    assert cal2.centre_ppm is None
    assert cal2.sd_ppm is None
    assert cal2.baseline.startswith("none yet")


def test_a_day_without_runs_says_so_in_one_line(state: Path) -> None:
    """No runs on the day: one line, no charts, no empty tables."""
    conn = db.connect(state, readonly=True)
    d = digest_mod.build_digest(conn, CONFIG, date(2026, 3, 20))
    conn.close()
    assert d.run_count == 0
    assert d.charts == ()
    assert digest_mod.render_text(d).splitlines()[1] == "No runs were recorded on 2026-03-20."
    page = digest_mod.render_html(d)
    assert "No runs were recorded on 2026-03-20." in page
    assert "<img" not in page
    assert "<table" not in page


def test_limits_are_drawn_and_points_take_the_metric_state() -> None:
    """The check's fixed warning and critical bounds become chart lines (with or without a
    baseline), and a point's colour is this metric's own finding in that run."""
    check = Check(
        name="drift",
        metric="calibrant.*.median_ppm",
        warning=Condition(outside=(-3.0, 3.0)),
        critical=Condition(above=5.0),
    )
    assert sorted(digest_mod._limits(check)) == [
        (-3.0, "warning"),
        (3.0, "warning"),
        (5.0, "critical"),
    ]
    at = datetime(2026, 3, 10, 1, 0, tzinfo=UTC)
    pts = [(at + timedelta(hours=i), float(i)) for i in range(4)]
    bare = digest_mod.plots.levey_jennings(pts, mean=None, sd=None, title="t")
    with_limits = digest_mod.plots.levey_jennings(
        pts, mean=None, sd=None, title="t", limits=digest_mod._limits(check)
    )
    assert bare != with_limits
    other = Finding(
        check="tic",
        severity=Severity.CRITICAL,
        metric="signal.tic_median",
        subject="signal.tic_median",
        message="m",
        value=1.0,
        limit="below 2",
    )
    run = history.RunRow(
        run_id=1,
        file_name="QC_1.mzML",
        path="/x/QC_1.mzML",
        size=10,
        mtime_ns=1,
        sha256="ab",
        acquired_at=at,
        judged_at=at,
        status=Status.CRITICAL,
        error=None,
        findings=(other,),
        metrics={"calibrant.siloxane-445.median_ppm": 0.4},
    )
    # the run is critical for its TIC; on the calibrant chart its point is ok
    assert digest_mod._metric_state(run, "calibrant.siloxane-445.median_ppm") == "ok"
    assert digest_mod._metric_state(run, "signal.tic_median") == "critical"


@pytest.mark.skipif(browser.CHROMIUM is None, reason="chromium is not installed (CI installs it)")
def test_digest_reads_at_desktop_and_phone_width(state: Path, tmp_path: Path) -> None:
    """Headless Chromium at 1280 px and at a 390 px phone width: the verdict is the first
    section and nothing is wider than the viewport. Headless windows are at least 500 px wide,
    so the phone width is an iframe of 390 px; a probe (in a copy for the test, the page itself
    has no script) posts the page's scroll width to the frame around it. Screenshots: tmp_path.
    """
    conn = db.connect(state, readonly=True)
    html_page = digest_mod.render_html(digest_mod.build_digest(conn, CONFIG, DAY))
    conn.close()
    probe = (
        "<script>window.onload=function(){parent.postMessage("
        "String(document.documentElement.scrollWidth),'*')}</script>"
    )
    page = tmp_path / "digest.html"
    page.write_text(html_page.replace("</body>", probe + "</body>"))
    assert html_page.index('id="verdict"') < html_page.index("<h2>")
    for width in (1280, 390):
        frame = tmp_path / f"frame-{width}.html"
        frame.write_text(
            "<!DOCTYPE html><html><body style='margin:0'>"
            "<script>window.addEventListener('message',function(e){"
            "document.body.setAttribute('data-width',e.data)})</script>"
            f"<iframe src='{page.name}' width='{width}' height='2400' style='border:0'>"
            "</iframe></body></html>"
        )
        size = f"{max(width, 500)},2400"
        dom = browser.dump_dom(frame, tmp_path / f"p{width}", size=size)
        found = re.search(r'data-width="(\d+)"', dom.stdout)
        assert found is not None, dom.stdout[:500]
        assert int(found.group(1)) <= width, (width, found.group(1))
        browser.screenshot(
            frame, tmp_path / f"digest-{width}.png", tmp_path / f"s{width}", size=size
        )

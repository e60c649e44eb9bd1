"""Quiet times as pure functions: maintenance windows across midnight and DST changes, silences'
``--for``/``--until``, and the config's ``maintenance:`` section with file/line errors.

Expected instants are written in UTC from the published EU summer-time rule (Directive
2000/84/EC: summer time starts and ends on the last Sunday of March / October at 01:00 UTC;
Europe/Berlin is UTC+1 in winter, UTC+2 in summer), not computed with zoneinfo.
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from watcher.config import Config, load_config_text
from watcher.errors import ConfigError
from watcher.notify import quiet

BERLIN = "Europe/Berlin"


def _config(every: str, tz: str = BERLIN) -> Config:
    return load_config_text(
        f"instrument: {{name: Kestrel-2 Q-TOF, timezone: {tz}}}\n"
        f'maintenance:\n  - every: "{every}"\n    reason: weekly cleaning\n',
        source="lab.yaml",
    )


def _utc(*parts: int) -> float:
    return datetime(*parts, tzinfo=UTC).timestamp()  # type: ignore[misc]


def test_window_across_midnight_and_the_autumn_change_is_five_real_hours() -> None:
    """``sat 23:00-03:00`` on 24/25 Oct 2026: 23:00 CEST is 21:00 UTC; the clocks go back at
    01:00 UTC (03:00 CEST -> 02:00 CET), so 03:00 CET is 02:00 UTC: five hours."""
    config = _config("sat 23:00-03:00")
    (window,) = config.maintenance
    spans = quiet.occurrences(window, BERLIN, _utc(2026, 10, 24, 12), _utc(2026, 10, 25, 12))
    assert spans == [(_utc(2026, 10, 24, 21), _utc(2026, 10, 25, 2))]
    # Inside the hour the clocks show twice (02:30 CEST = 00:30 UTC, 02:30 CET = 01:30 UTC)
    # and outside the window on either side.
    for at_s, inside in (
        (_utc(2026, 10, 25, 0, 30), True),
        (_utc(2026, 10, 25, 1, 30), True),
        (_utc(2026, 10, 24, 20, 59), False),
        (_utc(2026, 10, 25, 2, 0), False),
    ):
        periods = quiet.active_periods(config, [], at_s)
        assert (
            quiet.is_quiet(periods, "calibration drift", "calibrant.x.median_ppm", at_s) is inside
        )


def test_window_across_midnight_and_the_spring_change_is_three_real_hours() -> None:
    """``sat 23:00-03:00`` on 28/29 Mar 2026: 23:00 CET is 22:00 UTC; 03:00 CEST is 01:00 UTC."""
    config = _config("sat 23:00-03:00")
    (window,) = config.maintenance
    spans = quiet.occurrences(window, BERLIN, _utc(2026, 3, 28, 12), _utc(2026, 3, 29, 12))
    assert spans == [(_utc(2026, 3, 28, 22), _utc(2026, 3, 29, 1))]


def test_a_window_open_at_the_start_of_a_range_is_found() -> None:
    """A window that began the day before the range (it ends after midnight) still counts."""
    config = _config("daily 22:00-02:00", tz="UTC")
    (window,) = config.maintenance
    spans = quiet.occurrences(window, "UTC", _utc(2026, 12, 3, 1), _utc(2026, 12, 3, 1, 1))
    assert spans == [(_utc(2026, 12, 2, 22), _utc(2026, 12, 3, 2))]


@pytest.mark.parametrize(
    ("text", "days"),
    [
        ("sun 06:00-10:00", (6,)),
        ("mon-fri 22:00-02:00", (0, 1, 2, 3, 4)),
        ("fri-mon 22:00-02:00", (0, 4, 5, 6)),
        ("sat,sun 6:00-10:00", (5, 6)),
        ("daily 03:00-04:00", (0, 1, 2, 3, 4, 5, 6)),
    ],
)
def test_every_forms(text: str, days: tuple[int, ...]) -> None:
    """Days as date.weekday() numbers (0 = Monday, Python documentation)."""
    from watcher.config.maintenance import parse_every

    assert parse_every(text).days == days


@pytest.mark.parametrize(
    ("every", "fragment"),
    [
        ("sunday 06:00-10:00", "unknown day 'sunday'"),
        ("sun 06:00", 'expected "DAYS HH:MM-HH:MM"'),
        ("sun 06:00-06:00", "two different times"),
        ("sun 25:00-06:00", "not a time of day"),
    ],
)
def test_bad_windows_name_the_file_line_and_key(every: str, fragment: str) -> None:
    text = f'checks: []\nmaintenance:\n  - every: "{every}"\n'
    with pytest.raises(ConfigError) as err:
        load_config_text(text, source="lab.yaml")
    message = str(err.value)
    assert "lab.yaml:3" in message
    assert "maintenance[0].every" in message
    assert fragment in message


def test_one_off_window_needs_both_ends_in_order() -> None:
    with pytest.raises(ConfigError) as err:
        load_config_text(
            'maintenance:\n  - {from: "2026-12-24 18:00", until: "2026-12-24 08:00"}\n',
            source="lab.yaml",
        )
    assert "maintenance[0].until" in str(err.value)
    assert "is not after from" in str(err.value)
    with pytest.raises(ConfigError) as err:
        load_config_text('maintenance:\n  - {from: "2026-12-24 18:00"}\n', source="lab.yaml")
    assert "both from and until" in str(err.value)
    with pytest.raises(ConfigError) as err:
        load_config_text(
            "checks: [{name: drift, metric: calibrant.*.median_ppm, warning: {above: 3}}]\n"
            'maintenance:\n  - {every: "sun 06:00-10:00", checks: [drfit]}\n',
            source="lab.yaml",
        )
    assert "no check is named 'drfit'" in str(err.value)


def test_one_off_window_in_local_time() -> None:
    """``from``/``until`` are Berlin wall-clock times: 24 Dec 18:00 CET is 17:00 UTC."""
    config = load_config_text(
        f"instrument: {{timezone: {BERLIN}}}\n"
        'maintenance:\n  - {from: "2026-12-24 18:00", until: "2026-12-27 08:00", '
        "reason: holiday shutdown, checks: [unreadable]}\n",
        source="lab.yaml",
    )
    (period,) = quiet.maintenance_periods(config, _utc(2026, 12, 1), _utc(2027, 1, 1))
    assert (period.start_s, period.end_s) == (_utc(2026, 12, 24, 17), _utc(2026, 12, 27, 7))
    assert period.covers("unreadable", "file", _utc(2026, 12, 25))
    assert not period.covers("calibration drift", "file", _utc(2026, 12, 25))


def test_silence_for_is_real_time_and_until_is_the_next_local_clock_time() -> None:
    """``--for 4h`` is 14400 s whatever the clocks do; ``--until 08:00`` given at 22:00 CEST on
    the night the clocks go back is 08:00 CET next morning: 07:00 UTC, eleven hours later."""
    assert quiet.parse_for("4h") == 14400.0
    assert quiet.parse_for("1h30min") == 5400.0
    now_s = _utc(2026, 10, 24, 20)  # 22:00 CEST
    assert quiet.parse_until("08:00", now_s, BERLIN) == _utc(2026, 10, 25, 7)
    assert quiet.parse_until("23:00", now_s, BERLIN) == _utc(2026, 10, 24, 21)  # today still
    assert quiet.parse_until("2026-10-25 12:00", now_s, BERLIN) == _utc(2026, 10, 25, 11)
    for bad in ("0s", "4 hours", "31d"):
        with pytest.raises(ValueError, match="--for"):
            quiet.parse_for(bad)
    with pytest.raises(ValueError, match="not in the future"):
        quiet.parse_until("2026-10-24 12:00", now_s, BERLIN)


def test_subject_scope_matches_a_path_or_its_name() -> None:
    period = quiet.QuietPeriod(start_s=0, end_s=10, subject="leu-enk")
    assert period.covers("drift", "calibrant.leu-enk.median_ppm", 5)
    assert not period.covers("drift", "calibrant.siloxane-445.median_ppm", 5)
    assert not period.covers("drift", "calibrant.leu-enk.median_ppm", 10)  # end is exclusive

"""The inline SVG charts: well-formed XML, outside text escaped, every run drawn."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

import pytest

from watcher.view import svg

T0 = datetime(2026, 11, 30, 18, 0, tzinfo=UTC)
NS = "{http://www.w3.org/2000/svg}"


def _points(values: list[float], label: str = "QC.mzML") -> list[svg.Point]:
    return [svg.Point(T0 + timedelta(minutes=20 * i), v, "ok", label) for i, v in enumerate(values)]


def test_a_chart_parses_as_xml_and_draws_each_run() -> None:
    """The SVG is well-formed (Python's XML parser); one marker per run, one line per rule."""
    rules = [svg.Rule(0.0, "baseline mean", "#2e7d32"), svg.Rule(3.0, "warning limit", "#a66f00")]
    text = svg.chart(
        [svg.Line("siloxane-445", _points([0.1, 0.4, -0.2, 3.5]))],
        title="siloxane-445",
        ylabel="ppm",
        start=T0,
        end=T0 + timedelta(hours=2),
        rules=rules,
    )
    root = ET.fromstring(text)  # noqa: S314 - our own output
    assert len(root.findall(f".//{NS}circle")) == 4
    titled = [el.findtext(f"{NS}title") or "" for el in root.iter(f"{NS}line")]
    assert any(t.startswith("warning limit 3") for t in titled)


def test_markup_in_names_stays_text() -> None:
    """A file name and an ion name with markup are escaped: the parsed SVG holds them as text
    and has no element they would have made."""
    hostile = '<script>alert(1)</script>"&.mzML'
    text = svg.chart(
        [svg.Line("<b>ion</b>", _points([1.0, 2.0], label=hostile)), svg.Line("x", [])],
        title="<i>t</i>",
        ylabel="counts",
        start=T0,
        end=T0 + timedelta(hours=1),
    )
    root = ET.fromstring(text)  # noqa: S314 - our own output
    assert root.find(f".//{NS}script") is None
    assert root.find(f".//{NS}b") is None
    tips = [el.findtext(f"{NS}title") for el in root.iter(f"{NS}circle")]
    assert tips[0] is not None
    assert tips[0].startswith(hostile)


@pytest.mark.parametrize(
    ("value", "step", "text"),
    [
        (800_000.0, 25_000.0, "800k"),
        (3_250_000.0, 250_000.0, "3.25M"),
        (2.5, 2.5, "2.5"),
        (-5.0, 5.0, "-5"),
        (0.0, 0.5, "0.0"),
        (1e9, 1e9, "1G"),
    ],
)
def test_axis_labels_carry_the_steps_decimals(value: float, step: float, text: str) -> None:
    """Ticks read as a person writes them: no 8e+05 five times over (common practice)."""
    assert svg.tick_text(value, step) == text


def test_a_flat_series_gets_distinct_ticks() -> None:
    """All values equal: a band around them, so the y labels differ."""
    text = svg.chart(
        [svg.Line("caffeine", _points([8e5, 8e5, 8e5]))],
        title="t",
        ylabel="counts",
        start=T0,
        end=T0 + timedelta(hours=1),
    )
    root = ET.fromstring(text)  # noqa: S314 - our own output
    labels = [el.text for el in root.iter(f"{NS}text") if el.get("class") == "yl"]
    assert len(labels) >= 3
    assert len(set(labels)) == len(labels)


def test_time_ticks_fall_on_the_local_clock() -> None:
    """Ticks read in the instrument's zone: 6-hour steps at 00/06/12/18 local, day steps at
    local midnight across a DST change, month steps on the 1st (Europe/Oslo, tz database)."""
    from zoneinfo import ZoneInfo

    oslo = ZoneInfo("Europe/Oslo")
    day = svg._time_ticks(datetime(2026, 11, 27, tzinfo=oslo), datetime(2026, 11, 28, tzinfo=oslo))
    assert [t[1] for t in day] == [
        "27 Nov 00:00",
        "27 Nov 06:00",
        "27 Nov 12:00",
        "27 Nov 18:00",
        "28 Nov 00:00",
    ]
    weeks = svg._time_ticks(datetime(2026, 10, 20, tzinfo=oslo), datetime(2026, 11, 3, tzinfo=oslo))
    assert all(t[0].hour == 0 for t in weeks)  # 25 Oct 2026 is the 25-hour day
    months = svg._time_ticks(datetime(2026, 9, 5, tzinfo=oslo), datetime(2026, 12, 4, tzinfo=oslo))
    assert [t[1] for t in months] == ["Oct 2026", "Nov 2026", "Dec 2026"]

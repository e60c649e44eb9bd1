"""README's config table against the typed config: every key documented, every default true.

The table (README "Config reference") has one key per row and a default column; this test reads
it as a user would and compares each default with the dataclass default in
``watcher/config/model.py`` (the field behind a YAML key comes from ``watcher.config.keys``),
so a changed default in the code fails here until the README says the same. Derived defaults
(``state_dir``, ``health_log.dir``) are checked against the code that derives them.
"""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path
from typing import Any

import pytest

from tests.helpers.cli import REPO
from watcher.config import model
from watcher.config.keys import KEYS

README = REPO / "README.md"

# README key prefix -> (keys section, record types whose fields hold its keys)
_SECTIONS: dict[str, tuple[str, tuple[type, ...]]] = {
    "": ("config", (model.Config,)),
    "instrument.": ("instrument", (model.Instrument,)),
    "watch.": ("watch", (model.Watch,)),
    "calibrants[].": ("calibrant", (model.IonSpec,)),
    "expected_ions[].": ("expected_ion", (model.IonSpec, model.ExpectedIon)),
    "signal.": ("signal", (model.SignalSettings,)),
    "checks[].": ("check", (model.Check,)),
    "checks[].baseline.": ("baseline", (model.BaselineSpec,)),
    "checks[].ewma.": ("ewma", (model.EwmaSpec,)),
    "checks[].cusum.": ("cusum", (model.CusumSpec,)),
    "checks[].forecast.": ("forecast", (model.ForecastSpec,)),
    "alerts.": ("alerts", (model.Alerts,)),
    "alerts.channels[].": ("channel", (model.Channel,)),
    "health_log.": ("health_log", (model.HealthLog,)),
    "limits.": ("limits", (model.Limits,)),
    "central.": ("central", (model.Central,)),
    "convert.": ("convert", (model.Convert,)),
    "maintenance[].": ("maintenance", (model.PlannedWindow,)),
    "metrics.": ("metrics", (model.MetricsConfig,)),
    "serve.": ("serve", (model.Serve,)),
}
# Keys that hold a section of their own (documented by their sub-keys) or a loader-only value.
_SECTION_KEYS: dict[str, set[str]] = {
    "config": {"instrument", "watch", "calibrants", "expected_ions", "signal", "checks"}
    | {"alerts", "health_log", "limits", "central", "convert", "maintenance", "metrics"}
    | {"serve"},
    "check": {"baseline"},
    "alerts": {"channels"},
}
_LOADER_ONLY = {"secrets_file"}  # read before the Config is built: no dataclass field
_UNIT_S = {"s": 1.0, "min": 60.0, "h": 3600.0}


def _table() -> dict[str, str]:
    """README key -> its default cell, one entry per key (``a.x``, ``y`` rows expanded)."""
    text = README.read_text(encoding="utf-8")
    section = text.split("## Config reference", 1)[1].split("\n## ", 1)[0]
    rows: dict[str, str] = {}
    in_table = False
    for line in section.splitlines():
        if line.startswith("| key | default | meaning |"):
            in_table = True
            continue
        if not in_table or line.startswith("|---"):
            continue
        if not line.startswith("|"):
            if rows:
                break
            continue
        cells = [c.strip() for c in line.strip("|").split("|")]
        names = re.findall(r"`([^`]+)`", cells[0])
        first = names[0]
        prefix = first[: first.rfind(".") + 1] if "." in first else ""
        for i, name in enumerate(names):
            full = name if i == 0 else prefix + name
            assert full not in rows, f"README lists {full} twice"
            rows[full] = cells[1]
    return rows


def _field(key: str) -> tuple[type, dataclasses.Field[Any]]:
    """The record type and field behind a README key."""
    prefix = max((p for p in _SECTIONS if key.startswith(p)), key=len)
    name = key[len(prefix) :]
    _, records = _SECTIONS[prefix]
    for record in records:
        for f in dataclasses.fields(record):
            if f.metadata.get(model.YAML_KEY, f.name) == name:
                return record, f
    raise AssertionError(f"README key {key}: no such field in {records}")


def _parse(cell: str, field: dataclasses.Field[Any]) -> Any:
    """A README default cell as the value the dataclass would hold."""
    if cell == "unset":
        return None
    if cell in ("[]", "`[]`"):
        return ()
    if cell in ("true", "false"):
        return cell == "true"
    quoted = re.findall(r"`([^`]*)`", cell)
    if quoted and re.fullmatch(r"(`[^`]*`(, )?)+", cell):
        return tuple(quoted) if str(field.type).startswith("tuple") else quoted[0]
    m = re.fullmatch(r"(\d+(?:\.\d+)?)(?: (s|min|h))?", cell)
    assert m, f"default {cell!r} of {field.name}: not a README default"
    number, unit = float(m.group(1)), m.group(2)
    if unit is not None:
        # durations: the field's own unit is in its name (``_s`` seconds, ``_h`` hours)
        seconds = number * _UNIT_S[unit]
        return seconds / 3600.0 if field.name.endswith("_h") else seconds
    return number


def _default(field: dataclasses.Field[Any]) -> Any:
    if field.default is not dataclasses.MISSING:
        return field.default
    if field.default_factory is not dataclasses.MISSING:
        return field.default_factory()
    return "required"


def test_every_config_key_is_in_the_readme_table() -> None:
    """Each YAML key a user can write (``watcher.config.keys.KEYS``; conditions are listed in
    one row) has its row; the table names no key the config does not have."""
    rows = _table()
    documented = set(rows)
    wanted: set[str] = set()
    for prefix, (section, _) in _SECTIONS.items():
        skip = _SECTION_KEYS.get(section, set())
        wanted |= {prefix + k for k in KEYS[section] if k not in skip}
    wanted -= {"checks[].ewma", "checks[].cusum", "checks[].forecast"}  # rows of their own too
    assert sorted(wanted - documented) == []
    known = wanted | {"checks[].ewma", "checks[].cusum", "checks[].forecast"}
    assert sorted(documented - known) == []


@pytest.mark.parametrize("key", sorted(set(_table()) - _LOADER_ONLY))
def test_readme_default_equals_the_code(key: str, tmp_path: Path) -> None:
    """The README's default for ``key`` is the dataclass default (or what the code derives)."""
    cell = _table()[key]
    record, field = _field(key)
    if key == "serve.listen":  # a Listen record: the README writes it as HOST:PORT
        listen = _default(field)
        assert cell == f"`{listen.host}:{listen.port}`"
        return
    if key == "state_dir":
        assert cell == "`state/` beside the config file"
        assert field.default is None
        config = model.Config(source=tmp_path / "lab.yaml")
        assert model.state_dir_of(config) == tmp_path / "state"
        return
    if key == "health_log.dir":
        from watcher.notify.notifier import Notifier

        assert cell == "`<state_dir>/health`"
        assert field.default is None
        notifier = Notifier(model.Config(), tmp_path / "state")
        assert notifier.health.directory == tmp_path / "state" / "health"
        return
    if cell == "required":
        assert _default(field) == "required", f"{key} has a default in {record.__name__}"
        return
    expected = _default(field)
    got = _parse(cell, field)
    if isinstance(expected, tuple) and expected and isinstance(expected[0], Path):
        expected = tuple(str(p) for p in expected)
    assert got == expected, f"README says {key} defaults to {cell!r}; the code has {expected!r}"


def test_secrets_file_is_a_loader_key() -> None:
    """``secrets_file`` is read by the loader before the Config exists: it is a key of the
    top-level section without a dataclass field, and has no default."""
    assert "secrets_file" in KEYS["config"]
    assert _table()["secrets_file"] == "unset"
    assert "secrets_file" not in {f.name for f in dataclasses.fields(model.Config)}

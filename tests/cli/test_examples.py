"""Every shipped config validates against config/schema.json and through the loader."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from watcher.config.keys import KEYS
from watcher.config.load import load_config, load_config_text
from watcher.config.yamllines import read_yaml
from watcher.errors import ConfigError

ROOT = Path(__file__).resolve().parents[2]
SCHEMA_PATH = ROOT / "config" / "schema.json"
SHIPPED = [*sorted((ROOT / "config").glob("*.yaml")), ROOT / "watcher" / "data" / "default.yaml"]


def _schema() -> dict[str, Any]:
    schema: dict[str, Any] = json.loads(SCHEMA_PATH.read_text())
    return schema


def _validator() -> jsonschema.protocols.Validator:
    schema = _schema()
    cls = jsonschema.validators.validator_for(schema)
    cls.check_schema(schema)  # the schema itself is valid draft 2020-12 (jsonschema's metaschema)
    validator: jsonschema.protocols.Validator = cls(schema)
    return validator


def _data(text: str) -> Any:
    data, _lines, problems = read_yaml(text, source="t.yaml")
    assert problems == []
    return data


def test_schema_is_draft_2020_12() -> None:
    """config/schema.json declares and passes the draft 2020-12 metaschema."""
    assert _schema()["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert isinstance(_validator(), jsonschema.Draft202012Validator)


def test_shipped_configs_are_found() -> None:
    """The example, the demo and the embedded default are all covered."""
    names = {p.name for p in SHIPPED}
    assert {"example.yaml", "demo.yaml", "default.yaml"} <= names


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.name)
def test_shipped_config_matches_schema(path: Path) -> None:
    """The YAML validates against the JSON Schema (jsonschema)."""
    errors = [e.message for e in _validator().iter_errors(_data(path.read_text()))]
    assert errors == []


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.name)
def test_shipped_config_loads(path: Path) -> None:
    """The YAML loads through load_config without a problem."""
    config = load_config(path)
    assert config.checks
    assert config.calibrants


def test_example_documents_every_key() -> None:
    """config/example.yaml mentions every key the loader accepts."""
    text = (ROOT / "config" / "example.yaml").read_text()
    missing = sorted(
        key
        for keys in KEYS.values()
        for key in keys
        if not re.search(rf"(?<![\w-]){re.escape(key)}(?![\w-])", text)
    )
    assert missing == []


def _schema_sections(schema: dict[str, Any]) -> dict[str, set[str]]:
    props = schema["properties"]
    defs = schema["$defs"]

    def inner(node: dict[str, Any]) -> dict[str, Any]:
        # nullable sections are {"anyOf": [{...object...}, {"type": "null"}]}
        for option in node.get("anyOf", []):
            if option.get("type") == "object":
                return option
        return node

    check = defs["check"]["properties"]
    return {
        "config": set(props),
        "instrument": set(props["instrument"]["properties"]),
        "watch": set(props["watch"]["properties"]),
        "calibrant": set(defs["calibrant"]["properties"]),
        "expected_ion": set(defs["expected_ion"]["properties"]),
        "signal": set(props["signal"]["properties"]),
        "check": set(check),
        "condition": set(defs["condition"]["properties"]),
        "baseline": set(check["baseline"]["properties"]),
        "ewma": set(inner(check["ewma"])["properties"]),
        "cusum": set(inner(check["cusum"])["properties"]),
        "forecast": set(inner(check["forecast"])["properties"]),
        "alerts": set(props["alerts"]["properties"]),
        "channel": set(defs["channel"]["properties"]),
        "health_log": set(props["health_log"]["properties"]),
        "limits": set(props["limits"]["properties"]),
        "central": set(props["central"]["properties"]),
        "convert": set(props["convert"]["properties"]),
        "maintenance": set(props["maintenance"]["items"]["properties"]),
        "metrics": set(props["metrics"]["properties"]),
        "serve": set(props["serve"]["properties"]),
    }


def test_schema_keys_match_loader_keys() -> None:
    """The schema and the loader accept the same keys in every section."""
    sections = _schema_sections(_schema())
    assert set(sections) == set(KEYS)
    for name, keys in KEYS.items():
        assert sections[name] == set(keys), name


TYPOS = [
    ("watch:\n  setle_s: 3\n", "watch", "'setle_s'"),
    ("calibrants:\n  - {name: a, mz: 445.12, serch_ppm: 30}\n", "calibrants[0]", "'serch_ppm'"),
    (
        "checks:\n  - {name: t, metric: signal.tic_median, warning: {belw: 1}}\n",
        "checks[0].warning",
        "'belw'",
    ),
]


@pytest.mark.parametrize(("text", "key_path", "key"), TYPOS)
def test_typo_key_rejected_by_schema_and_loader(text: str, key_path: str, key: str) -> None:
    """A mistyped key fails both the JSON Schema and load_config_text."""
    errors = list(_validator().iter_errors(_data(text)))
    assert any(key in e.message for e in errors)
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, source="lab.yaml")
    assert any(p.key_path == key_path and key in p.message for p in caught.value.problems)

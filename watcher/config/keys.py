"""The keys each section of the YAML config allows; anything else is an unknown-key problem.

Derived from the typed model (``watcher.config.model``), so a new field is a new key without a
second list to keep in step. A field's YAML key is its name unless its metadata says otherwise
(``model.YAML_KEY``: durations drop the ``_s`` suffix, ``is``/``lambda`` are Python keywords;
None marks a field the loader sets). The loader, ``ionwarden validate`` and the tests that
compare this table with ``config/schema.json`` and ``config/example.yaml`` all read it.
"""

from __future__ import annotations

import dataclasses

from watcher.config import model

# Keys the loader reads before the sections are built, so they have no field of their own:
# ``secrets_file`` fills ``${NAME}`` references and is gone by the time the Config is made.
_LOADER_KEYS: dict[str, tuple[str, ...]] = {"config": ("secrets_file",)}

# The YAML section each record is written as. An expected ion is written flat: the ion's own
# keys beside its retention-time window and intensity floor.
_SECTIONS: dict[str, tuple[type, ...]] = {
    "config": (model.Config,),
    "instrument": (model.Instrument,),
    "watch": (model.Watch,),
    "calibrant": (model.IonSpec,),
    "expected_ion": (model.IonSpec, model.ExpectedIon),
    "signal": (model.SignalSettings,),
    "check": (model.Check,),
    "condition": (model.Condition,),
    "baseline": (model.BaselineSpec,),
    "ewma": (model.EwmaSpec,),
    "cusum": (model.CusumSpec,),
    "forecast": (model.ForecastSpec,),
    "alerts": (model.Alerts,),
    "channel": (model.Channel,),
    "health_log": (model.HealthLog,),
    "limits": (model.Limits,),
    "central": (model.Central,),
    "convert": (model.Convert,),
    "maintenance": (model.PlannedWindow,),
    "metrics": (model.MetricsConfig,),
    "serve": (model.Serve,),
}
# Fields that hold a nested record rather than a key's value of their own.
_NESTED = {(model.ExpectedIon, "ion")}


def yaml_keys(record: type) -> tuple[str, ...]:
    """The YAML keys of one record type, in field order (``YAML_KEY`` metadata, else the name)."""
    out: list[str] = []
    for f in dataclasses.fields(record):
        if (record, f.name) in _NESTED:
            continue
        key = f.metadata.get(model.YAML_KEY, f.name)
        if key is not None:
            out.append(key)
    return tuple(out)


def _build() -> dict[str, tuple[str, ...]]:
    table: dict[str, tuple[str, ...]] = {}
    for section, records in _SECTIONS.items():
        keys = [k for record in records for k in yaml_keys(record)]
        keys.extend(_LOADER_KEYS.get(section, ()))
        table[section] = tuple(dict.fromkeys(keys))
    return table


KEYS: dict[str, tuple[str, ...]] = _build()

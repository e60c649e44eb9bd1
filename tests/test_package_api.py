"""Each stage package names its entry points, and each name resolves to the object it promises.

The public surface is what other stages may use; everything else is the package's own. The
lists below are the contract: a change to them is a change of the package's interface.
"""

from __future__ import annotations

import importlib

import pytest

PUBLIC = {
    "watcher.config": None,  # the typed config records and the loader: checked separately below
    "watcher.intake": [
        "Settled",
        "Settler",
        "completeness",
        "sniff",
        "start_watching",
        "stop_watching",
    ],
    "watcher.measure": ["measure_file", "measure_or_failure", "measure_scans"],
    "watcher.measure.readers": ["open_run"],
    "watcher.rules": ["History", "judge"],
    "watcher.notify": ["Notifier", "build_digest"],
    "watcher.central": [
        "Publisher",
        "instruments",
        "metric_series",
        "open_alerts",
        "open_reader",
        "runs",
    ],
    "watcher.daemon": ["Daemon", "Pipeline", "main"],
    "watcher.cli": ["ExitCode", "main"],
}


@pytest.mark.parametrize("package", sorted(PUBLIC))
def test_package_exports_its_entry_points(package: str) -> None:
    module = importlib.import_module(package)
    names = PUBLIC[package]
    if names is not None:
        assert sorted(module.__all__) == names
    for name in module.__all__:
        assert getattr(module, name) is not None, f"{package}.{name}"


def test_config_exports_loader_and_records() -> None:
    config = importlib.import_module("watcher.config")
    for name in ("Config", "Check", "Watch", "load", "load_default", "state_dir_of"):
        assert name in config.__all__
    assert config.load_default().instrument.name  # the embedded default config loads


def test_unknown_name_is_an_attribute_error() -> None:
    measure = importlib.import_module("watcher.measure")
    with pytest.raises(AttributeError, match="no attribute"):
        _ = measure.no_such_entry_point

"""An instrument's profile in the central store: what a reader needs of its config to draw its
digest (name, time zone, calibrants, expected ions), and never more (no URLs, paths or secrets).

Each publisher writes its own profile with every batch; ``config_of`` turns one back into a
``Config`` for the digest of an instrument whose config file is on another machine. Its checks
stay there: that digest draws each series against the baseline of the earlier runs, without the
check's limit lines (the instrument's own config, given with ``-c``, draws them).
"""

from __future__ import annotations

from typing import Any

from watcher.config import Config, ExpectedIon, Instrument, IonSpec

PROFILE_VERSION = 1


def _ion(spec: IonSpec) -> dict[str, Any]:
    return {
        "name": spec.name,
        "mz": spec.mz,
        "formula": spec.formula,
        "peptide": spec.peptide,
        "adduct": spec.adduct,
        "charge": spec.charge,
        "search_ppm": spec.search_ppm,
    }


def profile_of(config: Config) -> dict[str, Any]:
    """The instrument's profile as JSON-ready data."""
    return {
        "version": PROFILE_VERSION,
        "timezone": config.instrument.timezone,
        "calibrants": [_ion(c) for c in config.calibrants],
        "expected_ions": [
            {
                **_ion(e.ion),
                "rt_window_min": list(e.rt_window_min) if e.rt_window_min else None,
                "min_intensity": e.min_intensity,
            }
            for e in config.expected_ions
        ],
    }


def _spec(d: dict[str, Any]) -> IonSpec:
    return IonSpec(
        name=str(d["name"]),
        mz=d.get("mz"),
        formula=d.get("formula"),
        peptide=d.get("peptide"),
        adduct=d.get("adduct"),
        charge=int(d.get("charge", 1)),
        search_ppm=float(d.get("search_ppm", 20.0)),
    )


def config_of(instrument: str, profile: dict[str, Any] | None) -> Config:
    """A config for reading ``instrument``'s runs (no watch folders, checks or channels)."""
    p = profile or {}
    expected = []
    for e in p.get("expected_ions", []):
        bounds = e.get("rt_window_min")
        window = (float(bounds[0]), float(bounds[1])) if bounds else None
        expected.append(
            ExpectedIon(
                ion=_spec(e),
                rt_window_min=window,
                min_intensity=float(e.get("min_intensity", 0.0)),
            )
        )
    return Config(
        instrument=Instrument(name=instrument, timezone=str(p.get("timezone", "UTC"))),
        calibrants=tuple(_spec(c) for c in p.get("calibrants", [])),
        expected_ions=tuple(expected),
    )

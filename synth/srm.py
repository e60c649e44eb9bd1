"""Synthetic targeted (SRM/MRM) runs: chromatogram-only mzML with exact peak truth.

A triple quadrupole measures each transition once per cycle, one after another (dwell time
apart), so every transition has its own time array. Each transition's trace is a Gaussian
elution peak (height, apex RT, sigma) on an optional flat baseline; a transition marked absent
is left out of the file (a method that lost it, or a wrong export), so the truth for it is
"missing". The truth is analytic: apex RT, height, area = height x sigma x sqrt(2 pi),
FWHM = 2 sqrt(2 ln 2) sigma (common practice for a Gaussian), and the TIC per cycle.

CV accessions follow the PSI-MS CV (tests/data/mzml-cv-terms.tsv): MS:1001473 selected reaction
monitoring chromatogram, MS:1000235 total ion current chromatogram, MS:1000827 isolation
window target m/z, MS:1000595 time array in UO:0000010 second or UO:0000031 minute.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np
import numpy.typing as npt

from synth._out import CountingWriter, encode_array, fmt
from synth.mzml import LAB, SOFTWARE_VERSION

INSTRUMENT = "Osprey-3 TQ"  # an invented triple quadrupole
_NS = 'xmlns="http://psi.hupo.org/ms/mzml" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"'
_SIGMA_TO_FWHM = 2.0 * math.sqrt(2.0 * math.log(2.0))
_TIME_UNITS = {"second": ("UO:0000010", 1.0), "minute": ("UO:0000031", 60.0)}

_MZ = ("MS:1000040", "m/z")
_EV = ("UO:0000266", "electronvolt")

FloatArray = npt.NDArray[np.float64]


@dataclass(frozen=True, slots=True, kw_only=True)
class SrmTransition:
    name: str
    precursor_mz: float
    product_mz: float
    apex_rt_s: float
    height: float  # counts per second at the apex, above the baseline
    sigma_s: float
    present: bool = True  # False: not written to the file at all

    @property
    def area(self) -> float:
        """Exact area of the Gaussian, counts (intensity x s)."""
        return self.height * self.sigma_s * math.sqrt(2.0 * math.pi)

    @property
    def fwhm_s(self) -> float:
        return _SIGMA_TO_FWHM * self.sigma_s


@dataclass(frozen=True, slots=True, kw_only=True)
class SrmSpec:
    transitions: tuple[SrmTransition, ...]
    duration_s: float = 600.0
    cycle_s: float = 0.5  # one pass over every transition
    baseline: float = 100.0  # counts of chemical noise under every transition
    noise_fraction: float = 0.0  # Gaussian noise, as a share of each point's value (seeded)
    seed: int = 0
    tic: bool = True  # also write a TIC chromatogram (the per-cycle sum)
    time_unit: str = "second"  # or "minute"
    compression: str = "none"  # or "zlib"
    indexed: bool = False
    # A stretch of the run where the spray failed: every transition is multiplied by this
    dropout: tuple[float, float, float] | None = None  # (start_s, end_s, factor)


@dataclass(slots=True)
class SrmTruth:
    """What the file holds, exactly."""

    transitions: dict[str, SrmTransition] = field(default_factory=dict)  # written ones
    missing: tuple[str, ...] = ()
    chromatogram_count: int = 0
    tic_time_s: list[float] = field(default_factory=list)
    tic: list[float] = field(default_factory=list)

    @property
    def tic_median(self) -> float:
        return float(np.median(self.tic)) if self.tic else math.nan


def trace(spec: SrmSpec, transition: SrmTransition, position: int) -> tuple[FloatArray, FloatArray]:
    """The transition's (time_s, intensity) points: measured ``position`` dwells into each cycle."""
    dwell_s = spec.cycle_s / max(len(spec.transitions), 1)
    cycles = int(spec.duration_s / spec.cycle_s)
    time_s = np.arange(cycles, dtype=np.float64) * spec.cycle_s + position * dwell_s
    values = spec.baseline + transition.height * np.exp(
        -0.5 * ((time_s - transition.apex_rt_s) / transition.sigma_s) ** 2
    )
    if spec.dropout is not None:
        start_s, end_s, factor = spec.dropout
        values = np.where((time_s >= start_s) & (time_s < end_s), values * factor, values)
    if spec.noise_fraction:
        rng = np.random.default_rng(spec.seed + 7919 * position)
        values = values * (1.0 + spec.noise_fraction * rng.standard_normal(values.size))
    return time_s, np.clip(values, 0.0, None)


def write_srm_mzml(path: Path | str, spec: SrmSpec) -> SrmTruth:
    """Write ``spec`` as a chromatogram-only mzML 1.1 file; returns its truth."""
    if spec.time_unit not in _TIME_UNITS:
        raise ValueError(f"time_unit must be 'second' or 'minute', got {spec.time_unit!r}")
    if spec.compression not in ("none", "zlib"):
        raise ValueError(f"compression must be 'none' or 'zlib', got {spec.compression!r}")
    path = Path(path)
    run_id = path.name.split(".")[0] or "run"
    truth = SrmTruth(missing=tuple(t.name for t in spec.transitions if not t.present))
    traces = [(t, *trace(spec, t, i)) for i, t in enumerate(spec.transitions) if t.present]
    chromatograms: list[tuple[str, str]] = []  # (id, xml)
    if spec.tic and traces:
        tic = np.sum([values for _t, _time, values in traces], axis=0)
        tic_time = traces[0][1]
        truth.tic_time_s, truth.tic = [float(v) for v in tic_time], [float(v) for v in tic]
        chromatograms.append(("TIC", _chromatogram("TIC", None, tic_time, tic, spec)))
    for transition, time_s, values in traces:
        truth.transitions[transition.name] = transition
        cid = (
            f"SRM SIC Q1={transition.precursor_mz:g} Q3={transition.product_mz:g} {transition.name}"
        )
        chromatograms.append((cid, _chromatogram(cid, transition, time_s, values, spec)))
    truth.chromatogram_count = len(chromatograms)
    offsets: list[tuple[str, int]] = []
    with CountingWriter(path) as out:
        out.write(_header(run_id, indexed=spec.indexed))
        count = len(chromatograms)
        out.write(f'      <chromatogramList count="{count}" defaultDataProcessingRef="DP1">\n')
        for index, (cid, xml) in enumerate(chromatograms):
            offsets.append((cid, out.offset + 8))
            out.write(xml.replace("__INDEX__", str(index)))
        out.write("      </chromatogramList>\n    </run>\n")
        out.write("  </mzML>\n" if spec.indexed else "</mzML>\n")
        if spec.indexed:
            index_offset = out.offset + 2
            parts = ['  <indexList count="1">\n    <index name="chromatogram">\n']
            parts += [
                f"      <offset idRef={quoteattr(cid)}>{off}</offset>\n" for cid, off in offsets
            ]
            parts.append("    </index>\n  </indexList>\n")
            out.write("".join(parts))
            out.write(f"  <indexListOffset>{index_offset}</indexListOffset>\n  <fileChecksum>")
            out.write(f"{out.hexdigest()}</fileChecksum>\n</indexedmzML>\n")
    return truth


def _cv(accession: str, name: str, value: str = "", unit: tuple[str, str] | None = None) -> str:
    unit_attrs = ""
    if unit is not None:
        ref = unit[0].split(":", 1)[0]
        unit_attrs = f' unitCvRef="{ref}" unitAccession="{unit[0]}" unitName="{unit[1]}"'
    ref = accession.split(":", 1)[0]
    return (
        f'<cvParam cvRef="{ref}" accession="{accession}" name="{name}" '
        f'value="{value}"{unit_attrs}/>'
    )


def _target(mz: float) -> str:
    return (
        "            <isolationWindow>\n"
        f"              {_cv('MS:1000827', 'isolation window target m/z', fmt(mz), _MZ)}\n"
        "            </isolationWindow>\n"
    )


def _array(values: FloatArray, *, kind: str, spec: SrmSpec) -> str:
    compress = spec.compression == "zlib"
    if kind == "time":
        unit_acc, factor = _TIME_UNITS[spec.time_unit]
        values = values / factor
        what = _cv("MS:1000595", "time array", unit=(unit_acc, spec.time_unit))
        bits, dtype = _cv("MS:1000523", "64-bit float"), "<f8"
    else:
        what = _cv(
            "MS:1000515", "intensity array", unit=("MS:1000131", "number of detector counts")
        )
        bits, dtype = _cv("MS:1000521", "32-bit float"), "<f4"
    text = encode_array(values, dtype, compress=compress)
    compression = (
        _cv("MS:1000574", "zlib compression") if compress else _cv("MS:1000576", "no compression")
    )
    return (
        f'            <binaryDataArray encodedLength="{len(text)}">\n'
        f"              {bits}\n              {compression}\n              {what}\n"
        f"              <binary>{text}</binary>\n            </binaryDataArray>\n"
    )


def _chromatogram(
    cid: str,
    transition: SrmTransition | None,
    time_s: FloatArray,
    values: FloatArray,
    spec: SrmSpec,
) -> str:
    kind = (
        _cv("MS:1000235", "total ion current chromatogram")
        if transition is None
        else _cv("MS:1001473", "selected reaction monitoring chromatogram")
    )
    targets = ""
    if transition is not None:
        targets = (
            "          <precursor>\n"
            + _target(transition.precursor_mz)
            + "            <activation>\n"
            f"              {_cv('MS:1000133', 'collision-induced dissociation')}\n"
            f"              {_cv('MS:1000045', 'collision energy', '25', _EV)}\n"
            "            </activation>\n"
            "          </precursor>\n"
            "          <product>\n" + _target(transition.product_mz) + "          </product>\n"
        )
    return (
        f'        <chromatogram index="__INDEX__" id={quoteattr(cid)} '
        f'defaultArrayLength="{time_s.size}">\n'
        f"          {kind}\n"
        + targets
        + '          <binaryDataArrayList count="2">\n'
        + _array(time_s, kind="time", spec=spec)
        + _array(values, kind="intensity", spec=spec)
        + "          </binaryDataArrayList>\n        </chromatogram>\n"
    )


def _header(run_id: str, *, indexed: bool) -> str:
    root = (
        f'<indexedmzML {_NS}>\n  <mzML {_NS} id={quoteattr(run_id)} version="1.1.0">\n'
        if indexed
        else f'<mzML {_NS} id={quoteattr(run_id)} version="1.1.0">\n'
    )
    return (
        '<?xml version="1.0" encoding="utf-8"?>\n' + root + '    <cvList count="2">\n'
        '      <cv id="MS" fullName="Proteomics Standards Initiative Mass Spectrometry Ontology" '
        'version="4.1.257" URI="http://purl.obolibrary.org/obo/ms.obo"/>\n'
        '      <cv id="UO" fullName="Unit Ontology" version="releases/2020-03-10" '
        'URI="http://purl.obolibrary.org/obo/uo.obo"/>\n'
        "    </cvList>\n"
        "    <fileDescription>\n      <fileContent>\n"
        f"        {_cv('MS:1001473', 'selected reaction monitoring chromatogram')}\n"
        "      </fileContent>\n    </fileDescription>\n"
        '    <softwareList count="1">\n'
        f'      <software id="ionwarden_synth" version="{SOFTWARE_VERSION}">\n'
        f"        {_cv('MS:1000799', 'custom unreleased software tool', 'ionwarden synth')}\n"
        "      </software>\n    </softwareList>\n"
        '    <instrumentConfigurationList count="1">\n'
        '      <instrumentConfiguration id="IC1">\n'
        f"        {_cv('MS:1000031', 'instrument model')}\n"
        f'        <userParam name="instrument model name" value="{INSTRUMENT}"/>\n'
        f'        <userParam name="laboratory" value="{LAB}"/>\n'
        "      </instrumentConfiguration>\n    </instrumentConfigurationList>\n"
        '    <dataProcessingList count="1">\n      <dataProcessing id="DP1">\n'
        '        <processingMethod order="1" softwareRef="ionwarden_synth">\n'
        f"          {_cv('MS:1000544', 'Conversion to mzML')}\n"
        "        </processingMethod>\n      </dataProcessing>\n    </dataProcessingList>\n"
        f'    <run id={quoteattr(run_id)} defaultInstrumentConfigurationRef="IC1" '
        'startTimeStamp="2026-11-30T21:00:00Z">\n'
    )

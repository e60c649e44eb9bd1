"""Write a synthetic run as mzML 1.1 (indexed or plain, optionally gzip), streamed to disk.

CV accessions follow the PSI-MS CV (checked against psi-ms-4.1.257 in tests/test_synth.py). The
indexed form carries spectrum and chromatogram offsets, ``indexListOffset`` and the SHA-1
``fileChecksum`` over every byte up to and including the opening ``<fileChecksum>`` tag.
"""

from __future__ import annotations

from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np

from synth._out import CountingWriter, encode_array, fmt
from synth.model import RunSpec, RunTruth, SynthScan, iter_scans

LAB = "Larkfield Metabolomics Core"
INSTRUMENT = "Kestrel-2 Q-TOF"
SOFTWARE_VERSION = "0.1.0"

_NS = 'xmlns="http://psi.hupo.org/ms/mzml" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance"'
_MZML_XSD = "http://psi.hupo.org/ms/mzml http://psidev.info/files/ms/mzML/xsd/mzML1.1.0.xsd"
_IDX_XSD = "http://psi.hupo.org/ms/mzml http://psidev.info/files/ms/mzML/xsd/mzML1.1.2_idx.xsd"


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


_MZ_UNIT = ("MS:1000040", "m/z")
_COUNTS_UNIT = ("MS:1000131", "number of detector counts")
_SECOND = ("UO:0000010", "second")
_MS = ("UO:0000028", "millisecond")


def _array_xml(
    values: np.ndarray, *, kind: str, bits: int, compress: bool, n_indent: int = 10
) -> str:
    dtype = "<f8" if bits == 64 else "<f4"
    text = encode_array(values, dtype, compress=compress)
    precision = (
        _cv("MS:1000523", "64-bit float") if bits == 64 else _cv("MS:1000521", "32-bit float")
    )
    compression = (
        _cv("MS:1000574", "zlib compression") if compress else _cv("MS:1000576", "no compression")
    )
    if kind == "mz":
        array = _cv("MS:1000514", "m/z array", unit=_MZ_UNIT)
    elif kind == "intensity":
        array = _cv("MS:1000515", "intensity array", unit=_COUNTS_UNIT)
    else:
        array = _cv("MS:1000595", "time array", unit=_SECOND)
    pad = " " * n_indent
    return (
        f'{pad}<binaryDataArray encodedLength="{len(text)}">\n'
        f"{pad}  {precision}\n{pad}  {compression}\n{pad}  {array}\n"
        f"{pad}  <binary>{text}</binary>\n{pad}</binaryDataArray>\n"
    )


def _spectrum_xml(scan: SynthScan, spec: RunSpec, *, compress: bool, mz_bits: int) -> str:
    lines = [
        f'      <spectrum index="{scan.index}" id="scan={scan.scan_number}" '
        f'defaultArrayLength="{scan.mz.size}">',
        "        " + _cv("MS:1000511", "ms level", str(scan.ms_level)),
        "        "
        + (
            _cv("MS:1000579", "MS1 spectrum")
            if scan.ms_level == 1
            else _cv("MS:1000580", "MSn spectrum")
        ),
        "        "
        + (
            _cv("MS:1000130", "positive scan")
            if spec.polarity > 0
            else _cv("MS:1000129", "negative scan")
        ),
        "        "
        + (
            _cv("MS:1000128", "profile spectrum")
            if scan.is_profile
            else _cv("MS:1000127", "centroid spectrum")
        ),
    ]
    bp_mz, bp_int = scan.base_peak
    lines.append("        " + _cv("MS:1000504", "base peak m/z", fmt(bp_mz), _MZ_UNIT))
    lines.append("        " + _cv("MS:1000505", "base peak intensity", fmt(bp_int), _COUNTS_UNIT))
    lines.append("        " + _cv("MS:1000285", "total ion current", fmt(scan.tic)))
    if scan.mz.size:
        lines.append(
            "        " + _cv("MS:1000528", "lowest observed m/z", fmt(scan.mz[0]), _MZ_UNIT)
        )
        lines.append(
            "        " + _cv("MS:1000527", "highest observed m/z", fmt(scan.mz[-1]), _MZ_UNIT)
        )
    lo, hi = spec.mz_range
    lines += [
        '        <scanList count="1">',
        "          " + _cv("MS:1000795", "no combination"),
        "          <scan>",
        "            " + _cv("MS:1000016", "scan start time", fmt(scan.rt_s), _SECOND),
        "            "
        + _cv("MS:1000927", "ion injection time", fmt(round(scan.injection_time_ms, 4)), _MS),
        '            <scanWindowList count="1">',
        "              <scanWindow>",
        "                " + _cv("MS:1000501", "scan window lower limit", fmt(lo), _MZ_UNIT),
        "                " + _cv("MS:1000500", "scan window upper limit", fmt(hi), _MZ_UNIT),
        "              </scanWindow>",
        "            </scanWindowList>",
        "          </scan>",
        "        </scanList>",
    ]
    if scan.ms_level > 1 and scan.precursor_mz is not None:
        pmz = fmt(scan.precursor_mz)
        lines += [
            '        <precursorList count="1">',
            f'          <precursor spectrumRef="scan={scan.precursor_scan_number}">',
            "            <isolationWindow>",
            "              " + _cv("MS:1000827", "isolation window target m/z", pmz, _MZ_UNIT),
            "              " + _cv("MS:1000828", "isolation window lower offset", "1.0", _MZ_UNIT),
            "              " + _cv("MS:1000829", "isolation window upper offset", "1.0", _MZ_UNIT),
            "            </isolationWindow>",
            '            <selectedIonList count="1">',
            "              <selectedIon>",
            "                " + _cv("MS:1000744", "selected ion m/z", pmz, _MZ_UNIT),
            "                " + _cv("MS:1000041", "charge state", str(scan.precursor_charge)),
            "                "
            + _cv(
                "MS:1000042", "peak intensity", fmt(scan.precursor_intensity or 0.0), _COUNTS_UNIT
            ),
            "              </selectedIon>",
            "            </selectedIonList>",
            "            <activation>",
            "              " + _cv("MS:1000133", "collision-induced dissociation"),
            "              "
            + _cv("MS:1000045", "collision energy", "25", ("UO:0000266", "electronvolt")),
            "            </activation>",
            "          </precursor>",
            "        </precursorList>",
        ]
    lines.append('        <binaryDataArrayList count="2">')
    text = "\n".join(lines) + "\n"
    text += _array_xml(scan.mz, kind="mz", bits=mz_bits, compress=compress)
    text += _array_xml(scan.intensity, kind="intensity", bits=32, compress=compress)
    return text + "        </binaryDataArrayList>\n      </spectrum>\n"


def _header(spec: RunSpec, run_id: str, *, indexed: bool, profile: bool) -> str:
    root = (
        f'<indexedmzML {_NS} xsi:schemaLocation="{_IDX_XSD}">\n'
        f'  <mzML {_NS} id={quoteattr(run_id)} version="1.1.0">\n'
        if indexed
        else f'<mzML {_NS} xsi:schemaLocation="{_MZML_XSD}" id={quoteattr(run_id)} '
        'version="1.1.0">\n'
    )
    stamp = spec.start_time.strftime("%Y-%m-%dT%H:%M:%SZ")
    mode = (
        _cv("MS:1000128", "profile spectrum") if profile else _cv("MS:1000127", "centroid spectrum")
    )
    return (
        '<?xml version="1.0" encoding="utf-8"?>\n' + root + '    <cvList count="2">\n'
        '      <cv id="MS" fullName="Proteomics Standards Initiative Mass Spectrometry Ontology" '
        'version="4.1.257" URI="http://purl.obolibrary.org/obo/ms.obo"/>\n'
        '      <cv id="UO" fullName="Unit Ontology" version="releases/2020-03-10" '
        'URI="http://purl.obolibrary.org/obo/uo.obo"/>\n'
        "    </cvList>\n"
        "    <fileDescription>\n"
        "      <fileContent>\n"
        f"        {_cv('MS:1000579', 'MS1 spectrum')}\n"
        f"        {_cv('MS:1000580', 'MSn spectrum')}\n"
        f"        {mode}\n"
        "      </fileContent>\n"
        "    </fileDescription>\n"
        '    <softwareList count="1">\n'
        f'      <software id="ionwarden_synth" version="{SOFTWARE_VERSION}">\n'
        f"        {_cv('MS:1000799', 'custom unreleased software tool', 'ionwarden synth')}\n"
        "      </software>\n"
        "    </softwareList>\n"
        '    <instrumentConfigurationList count="1">\n'
        '      <instrumentConfiguration id="IC1">\n'
        f"        {_cv('MS:1000031', 'instrument model')}\n"
        f'        <userParam name="instrument model name" value="{INSTRUMENT}"/>\n'
        f'        <userParam name="laboratory" value="{LAB}"/>\n'
        "      </instrumentConfiguration>\n"
        "    </instrumentConfigurationList>\n"
        '    <dataProcessingList count="1">\n'
        '      <dataProcessing id="DP1">\n'
        '        <processingMethod order="1" softwareRef="ionwarden_synth">\n'
        f"          {_cv('MS:1000544', 'Conversion to mzML')}\n"
        "        </processingMethod>\n"
        "      </dataProcessing>\n"
        "    </dataProcessingList>\n"
        f'    <run id={quoteattr(run_id)} defaultInstrumentConfigurationRef="IC1" '
        f'startTimeStamp="{stamp}">\n'
        f'      <spectrumList count="{spec.n_spectra}" defaultDataProcessingRef="DP1">\n'
    )


def write_mzml(
    path: Path | str,
    spec: RunSpec,
    *,
    indexed: bool = True,
    gz: bool = False,
    compression: str = "zlib",
    mz_precision: int = 64,
) -> RunTruth:
    """Generate ``spec`` and write it as mzML 1.1; returns the run's ground truth.

    Args:
        path: output file (``.mzML`` or ``.mzML.gz``; ``gz`` decides the compression).
        spec: the run to generate.
        indexed: wrap in ``indexedmzML`` with offsets and SHA-1 checksum.
        gz: gzip the whole file (offsets and checksum refer to the uncompressed bytes).
        compression: binary array compression, ``"zlib"`` or ``"none"``.
        mz_precision: 64 or 32 bits for the m/z arrays (intensities are always 32-bit).
    """
    if compression not in ("zlib", "none"):
        raise ValueError(f"compression must be 'zlib' or 'none', got {compression!r}")
    if mz_precision not in (32, 64):
        raise ValueError(f"mz_precision must be 32 or 64, got {mz_precision}")
    path = Path(path)
    run_id = path.name.split(".")[0] or "run"
    truth = RunTruth()
    compress = compression == "zlib"
    spectrum_offsets: list[tuple[str, int]] = []
    tic_rt: list[float] = []
    tic_values: list[float] = []
    with CountingWriter(path, gz=gz) as out:
        out.write(_header(spec, run_id, indexed=indexed, profile=spec.profile))
        for scan in iter_scans(spec, truth):
            spectrum_offsets.append((f"scan={scan.scan_number}", out.offset + 6))
            out.write(_spectrum_xml(scan, spec, compress=compress, mz_bits=mz_precision))
            if scan.ms_level == 1:
                tic_rt.append(scan.rt_s)
                tic_values.append(scan.tic)
        out.write("      </spectrumList>\n")
        out.write('      <chromatogramList count="1" defaultDataProcessingRef="DP1">\n')
        chrom_offset = out.offset + 8
        out.write(
            f'        <chromatogram index="0" id="TIC" defaultArrayLength="{len(tic_rt)}">\n'
            f"          {_cv('MS:1000235', 'total ion current chromatogram')}\n"
            '          <binaryDataArrayList count="2">\n'
            + _array_xml(np.asarray(tic_rt), kind="time", bits=64, compress=compress, n_indent=12)
            + _array_xml(
                np.asarray(tic_values), kind="intensity", bits=32, compress=compress, n_indent=12
            )
            + "          </binaryDataArrayList>\n        </chromatogram>\n"
        )
        out.write("      </chromatogramList>\n    </run>\n")
        out.write("  </mzML>\n" if indexed else "</mzML>\n")
        if indexed:
            index_offset = out.offset + 2
            parts = ['  <indexList count="2">\n    <index name="spectrum">\n']
            parts += [
                f'      <offset idRef="{sid}">{off}</offset>\n' for sid, off in spectrum_offsets
            ]
            parts.append('    </index>\n    <index name="chromatogram">\n')
            parts.append(f'      <offset idRef="TIC">{chrom_offset}</offset>\n')
            parts.append("    </index>\n  </indexList>\n")
            out.write("".join(parts))
            out.write(f"  <indexListOffset>{index_offset}</indexListOffset>\n  <fileChecksum>")
            out.write(f"{out.hexdigest()}</fileChecksum>\n</indexedmzML>\n")
    return truth

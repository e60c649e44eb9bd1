"""Write a synthetic run as mzXML 3.2 (zlib, 64-bit network-order peaks), scan index and SHA-1."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from synth._out import CountingWriter, encode_array, fmt
from synth.model import RunSpec, RunTruth, SynthScan, iter_scans
from synth.mzml import INSTRUMENT

_NS = (
    'xmlns="http://sashimi.sourceforge.net/schema_revision/mzXML_3.2" '
    'xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
    'xsi:schemaLocation="http://sashimi.sourceforge.net/schema_revision/mzXML_3.2 '
    'http://sashimi.sourceforge.net/schema_revision/mzXML_3.2/mzXML_idx_3.2.xsd"'
)


def _scan_xml(scan: SynthScan, spec: RunSpec) -> str:
    bp_mz, bp_int = scan.base_peak
    pairs = np.empty(scan.mz.size * 2)
    pairs[0::2] = scan.mz
    pairs[1::2] = scan.intensity
    peaks = encode_array(pairs, ">f8", compress=True)
    # compressedLen is the length of the zlib stream before base64 (3 bytes per 4 characters).
    padding = peaks.count("=")
    compressed_len = len(peaks) * 3 // 4 - padding
    low = fmt(scan.mz[0]) if scan.mz.size else "0.0"
    high = fmt(scan.mz[-1]) if scan.mz.size else "0.0"
    head = (
        f'  <scan num="{scan.scan_number}" scanType="Full"'
        f' centroided="{0 if scan.is_profile else 1}"'
        f' msLevel="{scan.ms_level}" peaksCount="{scan.mz.size}"'
        f' polarity="{"+" if spec.polarity > 0 else "-"}" retentionTime="PT{fmt(scan.rt_s)}S"'
        f' lowMz="{low}" highMz="{high}" basePeakMz="{fmt(bp_mz)}"'
        f' basePeakIntensity="{fmt(bp_int)}" totIonCurrent="{fmt(scan.tic)}">\n'
    )
    precursor = ""
    if scan.ms_level > 1 and scan.precursor_mz is not None:
        precursor = (
            f'   <precursorMz precursorScanNum="{scan.precursor_scan_number}"'
            f' precursorIntensity="{fmt(scan.precursor_intensity or 0.0)}"'
            f' precursorCharge="{scan.precursor_charge}" activationMethod="CID">'
            f"{fmt(scan.precursor_mz)}</precursorMz>\n"
        )
    return (
        head
        + precursor
        + f'   <peaks compressionType="zlib" compressedLen="{compressed_len}" precision="64"'
        f' byteOrder="network" contentType="m/z-int">{peaks}</peaks>\n  </scan>\n'
    )


def write_mzxml(path: Path | str, spec: RunSpec) -> RunTruth:
    """Generate ``spec`` and write it as indexed mzXML 3.2; returns the run's ground truth."""
    path = Path(path)
    truth = RunTruth()
    offsets: list[tuple[int, int]] = []
    with CountingWriter(path) as out:
        out.write(
            '<?xml version="1.0" encoding="ISO-8859-1"?>\n'
            f"<mzXML {_NS}>\n"
            f' <msRun scanCount="{spec.n_spectra}" startTime="PT0S"'
            f' endTime="PT{fmt(spec.n_cycles * spec.ms1_interval_s)}S">\n'
            f'  <parentFile fileName="{path.stem}.raw" fileType="RAWData"'
            ' fileSha1="0000000000000000000000000000000000000000"/>\n'
            "  <msInstrument>\n"
            '   <msManufacturer category="msManufacturer" value="Larkfield"/>\n'
            f'   <msModel category="msModel" value="{INSTRUMENT}"/>\n'
            '   <msIonisation category="msIonisation" value="ESI"/>\n'
            '   <msMassAnalyzer category="msMassAnalyzer" value="TOF"/>\n'
            '   <msDetector category="msDetector" value="MCP"/>\n'
            "  </msInstrument>\n"
            f'  <dataProcessing centroided="{0 if spec.profile else 1}">\n'
            '   <software type="conversion" name="ionwarden synth" version="0.1.0"/>\n'
            "  </dataProcessing>\n"
        )
        for scan in iter_scans(spec, truth):
            offsets.append((scan.scan_number, out.offset + 2))
            out.write(_scan_xml(scan, spec))
        out.write(" </msRun>\n")
        index_offset = out.offset + 1
        parts = [' <index name="scan">\n']
        parts += [f'  <offset id="{num}">{off}</offset>\n' for num, off in offsets]
        parts.append(" </index>\n")
        out.write("".join(parts))
        out.write(f" <indexOffset>{index_offset}</indexOffset>\n <sha1>")
        out.write(f"{out.hexdigest()}</sha1>\n</mzXML>\n")
    return truth

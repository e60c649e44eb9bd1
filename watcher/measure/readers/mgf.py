"""MGF peak lists to Scan records through pyteomics' sequential reader; every spectrum is MS2.

MGF carries no MS level, no MS1 scans and no header TIC: TIC and base peak come from the peak
list. File-level header parameters (e.g. ``CHARGE=2+ and 3+``) apply to spectra that lack their
own; when a spectrum is left with several possible charges its charge is unknown (None).
"""

from __future__ import annotations

from typing import IO, TYPE_CHECKING, Any

import numpy as np
from pyteomics import mgf

from watcher.measure.scan import Scan

if TYPE_CHECKING:
    from collections.abc import Iterator


def read_scans(source: IO[str]) -> Iterator[Scan]:
    """Yield one MS2 Scan per ``BEGIN IONS`` block; peak arrays are summed, not kept."""
    reader = mgf.read(
        source, use_index=False, use_header=True, convert_arrays=1, read_charges=False
    )
    with reader:
        for index, spectrum in enumerate(reader):
            if spectrum is None:  # pyteomics' way of saying the last block never closed
                raise ValueError(f"spectrum {index + 1} has no END IONS (truncated while copying?)")
            yield _scan(spectrum, index)


def _scan(spectrum: dict[str, Any], index: int) -> Scan:
    params = spectrum.get("params", {})
    intensity = np.asarray(spectrum.get("intensity array", ()), dtype=np.float64)
    mz = np.asarray(spectrum.get("m/z array", ()), dtype=np.float64)
    pepmass = params.get("pepmass")
    precursor_mz = None
    if isinstance(pepmass, tuple | list) and pepmass and pepmass[0] is not None:
        precursor_mz = float(pepmass[0])
    charges = params.get("charge")
    charge_list = list(charges) if isinstance(charges, list | tuple) else []
    rt = params.get("rtinseconds")
    scan = Scan(
        index=index,
        ms_level=2,
        rt_s=_rt_s(rt),
        tic=float(intensity.sum()),
        base_peak_mz=None,
        base_peak_intensity=None,
        precursor_mz=precursor_mz,
        precursor_charge=int(charge_list[0]) if len(charge_list) == 1 else None,
        is_profile=False,  # a peak list is centroided by construction
    )
    if intensity.size:
        top = int(np.argmax(intensity))
        scan.base_peak_mz, scan.base_peak_intensity = float(mz[top]), float(intensity[top])
    return scan


def _rt_s(value: Any) -> float | None:
    """RTINSECONDS as seconds; a negative value (``RTINSECONDS=-1``) is a writer's "unknown"."""
    if value is None:
        return None
    rt_s = float(value)
    return None if rt_s < 0 else rt_s

"""One chromatogram as the readers hand it to the metric code: its kind, isolation targets, arrays.

Internal to ``watcher.measure`` like ``Scan`` (it holds numpy arrays, so it is not a stage
record). Targeted runs (SRM/MRM) export one chromatogram per transition and often a total ion
current chromatogram; the kind comes from the chromatogram type accession (MS:1000626 children),
the m/z targets from the precursor's and product's ``isolationWindow`` (MS:1000827).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from watcher.measure.scan import FloatArray

TIC = "tic"  # MS:1000235 total ion current chromatogram
SRM = "srm"  # MS:1001473 selected reaction monitoring chromatogram
SIC = "sic"  # MS:1000627 selected ion current chromatogram
SIM = "sim"  # MS:1001472 selected ion monitoring chromatogram
BPC = "bpc"  # MS:1000628 basepeak chromatogram
OTHER = "other"  # pressure, flow, temperature, absorption, or no type given


@dataclass(slots=True, kw_only=True)
class Chromatogram:
    index: int  # 0-based position among the file's chromatograms
    id: str  # the native id as written
    kind: str  # TIC, SRM, SIC, SIM, BPC or OTHER
    precursor_mz: float | None  # precursor isolation window target m/z
    product_mz: float | None  # product isolation window target m/z
    time_s: FloatArray  # ascending (readers sort if needed)
    intensity: FloatArray

    @property
    def is_transition(self) -> bool:
        """Both a precursor and a product target: one SRM/MRM transition's trace."""
        return self.kind != TIC and self.precursor_mz is not None and self.product_mz is not None

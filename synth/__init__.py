"""Synthetic LC-MS runs with exact ground truth, written as mzML, mzML.gz, mzXML or MGF."""

from synth.mgf import write_mgf
from synth.model import CalibrantTruth, RunSpec, RunTruth, TargetTruth, iter_scans, simulate
from synth.mzml import write_mzml
from synth.mzxml import write_mzxml

__all__ = [
    "CalibrantTruth",
    "RunSpec",
    "RunTruth",
    "TargetTruth",
    "iter_scans",
    "simulate",
    "write_mgf",
    "write_mzml",
    "write_mzxml",
]

"""The project's nuclide table against pyteomics (its transcription source) and molmass.

NIST Standard Reference Database 144 ("Atomic Weights and Isotopic Compositions") is the origin
of both libraries' values; molmass is an independent transcription, so its masses agree to the
tables' printed precision and its abundances to within their stated uncertainty.
"""

from __future__ import annotations

import pytest

from watcher.measure.nuclides import ELECTRON_MASS_DA, ELEMENTS, RESIDUES


def test_every_nuclide_matches_pyteomics_exactly() -> None:
    from pyteomics import mass

    for element, (mono_da, nuclides) in ELEMENTS.items():
        table = mass.nist_mass[element]
        assert table[0][0] == mono_da, element
        natural = {a: (m, ab) for a, (m, ab) in table.items() if a != 0 and ab > 0}
        assert {a: (m, ab) for a, m, ab in nuclides} == natural, element
    assert mass.nist_mass["e-"][0][0] == ELECTRON_MASS_DA
    for residue, elements in RESIDUES.items():
        assert {e: n for e, n in mass.std_aa_comp[residue].items() if n} == elements, residue


def test_nuclides_agree_with_molmass() -> None:
    """Masses to 5e-6 Da (the two transcriptions follow different atomic-mass evaluations: 18O
    differs by 1.4e-6 Da) and abundances to 1e-3 (absolute) for the elements of QC compounds."""
    from molmass import ELEMENTS as MOLMASS

    for symbol in ("H", "C", "N", "O", "S", "P", "Si", "Cl", "Br", "Na", "K", "F", "I"):
        _mono, nuclides = ELEMENTS[symbol]
        theirs = MOLMASS[symbol].isotopes
        for a, m, ab in nuclides:
            assert theirs[a].mass == pytest.approx(m, abs=5e-6), (symbol, a)
            assert theirs[a].abundance == pytest.approx(ab, abs=1e-3), (symbol, a)


def test_ion_masses_no_longer_need_pyteomics_mass_at_import() -> None:
    """Measuring imports no pyteomics.mass (which pulls SQLAlchemy in through Unimod)."""
    import subprocess
    import sys

    code = (
        "import sys, watcher.measure.run, watcher.cli.check; "
        "print('pyteomics.mass' in sys.modules, 'sqlalchemy' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]

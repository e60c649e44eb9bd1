"""Ion m/z and isotope ratios from formulas, peptides and adducts, against outside sources."""

from __future__ import annotations

import csv

import pytest
from molmass import Formula

from tests.helpers.refdata import REFERENCE as SHARED_REFERENCE
from watcher.config import IonSpec
from watcher.measure.ions import isotope_ratios, ppm_error, resolve

REFERENCE = SHARED_REFERENCE / "check-ions.tsv"


def _check_ions() -> dict[tuple[str, int], dict[str, str]]:
    with REFERENCE.open(encoding="utf-8") as fh:
        rows = csv.DictReader((line for line in fh if not line.startswith("#")), delimiter="\t")
        return {(row["name"], int(row["charge"])): row for row in rows}


CHECK_IONS = _check_ions()

# Our IonSpec for each row of check-ions.tsv (row name, charge) -> spec.
REFERENCE_SPECS: list[tuple[tuple[str, int], IonSpec]] = [
    (("caffeine", 1), IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H", charge=1)),
    (("MRFA (Met-Arg-Phe-Ala)", 1), IonSpec(name="mrfa", peptide="MRFA", charge=1)),
    (("MRFA (Met-Arg-Phe-Ala)", 2), IonSpec(name="mrfa", peptide="MRFA", charge=2)),
    (
        (
            "dodecamethylcyclohexasiloxane (C2H6SiO)6, "
            "polysiloxane background ion used as lock mass",
            1,
        ),
        IonSpec(name="siloxane-445", formula="(C2H6SiO)6", adduct="+H"),
    ),
    (("leucine enkephalin YGGFL", 1), IonSpec(name="leu-enk", peptide="YGGFL", charge=1)),
    (("acetone", 1), IonSpec(name="acetone", formula="C3H6O", adduct="M+.")),
    *[
        (
            (f"sodium formate cluster n={n}", 1),
            IonSpec(name=f"formate-{n}", formula=f"(HCOONa){n}", adduct="+Na"),
        )
        for n in range(1, 6)
    ],
]


@pytest.mark.parametrize(("row_key", "spec"), REFERENCE_SPECS, ids=lambda v: getattr(v, "name", ""))
def test_mz_matches_reference_table(row_key: tuple[str, int], spec: IonSpec) -> None:
    """Each check ion's m/z agrees with check-ions.tsv within 0.1 ppm."""
    row = CHECK_IONS[row_key]
    ion = resolve(spec)
    # check-ions.tsv (tests/data, computed with molmass 2026.1.8 from NIST masses)
    assert abs(ppm_error(ion.mz, float(row["mz_molmass"]))) < 0.1
    assert ion.charge == int(row["charge"])


@pytest.mark.parametrize(("row_key", "spec"), REFERENCE_SPECS, ids=lambda v: getattr(v, "name", ""))
def test_isotope_ratios_match_reference_table(row_key: tuple[str, int], spec: IonSpec) -> None:
    """(M+1)/M and (M+2)/M agree with check-ions.tsv to its six printed decimals."""
    row = CHECK_IONS[row_key]
    ion = resolve(spec)
    # check-ions.tsv (tests/data; molmass Formula.spectrum(), all isotopes included)
    assert ion.m1_ratio_expected == pytest.approx(float(row["m1_over_m_molmass"]), abs=1e-6)
    assert ion.m2_ratio_expected == pytest.approx(float(row["m2_over_m_molmass"]), abs=1e-6)


def _molmass_mz(ion_formula: str) -> float:
    f = Formula(ion_formula)
    return float(f.monoisotopic_mass) / abs(int(f.charge))


def _molmass_ratios(ion_formula: str) -> tuple[float, float]:
    f = Formula(ion_formula)
    spectrum = f.spectrum()
    mono = min(spectrum.values(), key=lambda e: abs(e.mass - f.monoisotopic_mass)).massnumber
    fractions = {e.massnumber: e.fraction for e in spectrum.values()}
    return (
        fractions.get(mono + 1, 0.0) / fractions[mono],
        fractions.get(mono + 2, 0.0) / fractions[mono],
    )


# (our spec, the same ion written for molmass, expected signed charge)
ADDUCT_CASES: list[tuple[IonSpec, str, int]] = [
    (IonSpec(name="caf-na", formula="C8H10N4O2", adduct="+Na"), "[C8H10N4O2Na]+", 1),
    (IonSpec(name="caf-k", formula="C8H10N4O2", adduct="+K"), "[C8H10N4O2K]+", 1),
    (IonSpec(name="caf-nh4", formula="C8H10N4O2", adduct="+NH4"), "[C8H14N5O2]+", 1),
    (IonSpec(name="caf-mh", formula="C8H10N4O2", adduct="-H", charge=-1), "[C8H9N4O2]-", -1),
    (IonSpec(name="caf-mh-brk", formula="C8H10N4O2", adduct="[M-H]-"), "[C8H9N4O2]-", -1),
    (IonSpec(name="caf-cl", formula="C8H10N4O2", adduct="+Cl", charge=-1), "[C8H10N4O2Cl]-", -1),
    (IonSpec(name="caf-2h", formula="C8H10N4O2", adduct="+H", charge=2), "[C8H12N4O2]2+", 2),
    (IonSpec(name="caf-2h-brk", formula="C8H10N4O2", adduct="[M+2H]2+"), "[C8H12N4O2]2+", 2),
    (IonSpec(name="reserpine", formula="C33H40N2O9", adduct="+H"), "[C33H41N2O9]+", 1),
    (IonSpec(name="acetone-anion", formula="C3H6O", adduct="M-.", charge=-1), "[C3H6O]-", -1),
    (IonSpec(name="acetone-brk", formula="C3H6O", adduct="[M]+."), "[C3H6O]+", 1),
    (IonSpec(name="caf-na-brk", formula="C8H10N4O2", adduct="[M+Na]+"), "[C8H10N4O2Na]+", 1),
    (IonSpec(name="caf-2na", formula="C8H10N4O2", adduct="+Na", charge=2), "[C8H10N4O2Na2]2+", 2),
    (IonSpec(name="mrfa-3h", peptide="MRFA", charge=3), "[C23H40N7O5S]3+", 3),
    (IonSpec(name="mrfa-neg", peptide="MRFA", charge=-1), "[C23H36N7O5S]-", -1),
    (IonSpec(name="default-h", formula="C8H10N4O2"), "[C8H11N4O2]+", 1),
]


@pytest.mark.parametrize(
    ("spec", "molmass_formula", "charge"), ADDUCT_CASES, ids=lambda v: getattr(v, "name", None)
)
def test_adduct_mz_matches_molmass(spec: IonSpec, molmass_formula: str, charge: int) -> None:
    """Every adduct, charge state and radical gives molmass' m/z within 0.1 ppm."""
    ion = resolve(spec)
    assert ion.charge == charge
    # molmass 2026.1.8 (registry library, NIST masses, electron mass for charged formulas)
    assert abs(ppm_error(ion.mz, _molmass_mz(molmass_formula))) < 0.1


@pytest.mark.parametrize(
    ("spec", "molmass_formula", "charge"), ADDUCT_CASES, ids=lambda v: getattr(v, "name", None)
)
def test_isotope_ratios_match_molmass(spec: IonSpec, molmass_formula: str, charge: int) -> None:
    """(M+1)/M and (M+2)/M agree with molmass' isotope pattern of the same ion."""
    ion = resolve(spec)
    m1, m2 = _molmass_ratios(molmass_formula)
    # molmass Formula.spectrum() (registry library; IUPAC representative abundances)
    assert ion.m1_ratio_expected == pytest.approx(m1, rel=1e-6)
    assert ion.m2_ratio_expected == pytest.approx(m2, rel=1e-6)


def test_sodium_adduct_is_not_one_electron_high() -> None:
    """[M+Na]+ of the formate cluster n=1 is the table value, not pyteomics' Na+-carrier value."""
    ion = resolve(IonSpec(name="f1", formula="CHNaO2", adduct="+Na"))
    # check-ions.tsv note: charge_carrier='Na+' gives 90.977193, one electron mass too high
    assert abs(ppm_error(ion.mz, 90.97664425546094)) < 0.1
    assert abs(ppm_error(ion.mz, 90.977193)) > 5


def test_acetone_molecular_ion_at_nominal_58() -> None:
    """The acetone radical cation sits at nominal m/z 58 and carries no added hydrogen."""
    ion = resolve(IonSpec(name="acetone", formula="C3H6O", adduct="M+."))
    # common practice: acetone's EI molecular ion is m/z 58 (C3H6O, nominal mass 58)
    assert round(ion.mz) == 58
    assert dict(ion.composition or ()) == {"C": 3, "H": 6, "O": 1}


def test_acetone_ratio_uses_full_abundances() -> None:
    """Acetone (M+1)/M includes 2H and 17O: 0.0335, not the thresholded 0.0325."""
    m1, _m2 = isotope_ratios({"C": 3, "H": 6, "O": 1})
    # tests/data/README.md pitfall 4 and check-ions.tsv (molmass: 0.033518)
    assert m1 == pytest.approx(0.033518, abs=2e-6)


@pytest.mark.parametrize("n_carbons", [1, 6, 20, 60])
def test_carbon_skeleton_m1_close_to_1_1_percent_per_carbon(n_carbons: int) -> None:
    """A carbon-only molecule's (M+1)/M is close to 1.1 % per carbon and equals molmass'."""
    m1, _m2 = isotope_ratios({"C": n_carbons})
    # common practice (rule of thumb): M+1 is about 1.1 % of M per carbon atom
    assert m1 == pytest.approx(0.011 * n_carbons, rel=0.03)
    # molmass Formula.spectrum() of the same skeleton
    assert m1 == pytest.approx(_molmass_ratios(f"C{n_carbons}")[0], rel=1e-6)


def test_bare_mz_keeps_value_and_has_no_composition() -> None:
    """An ion given as mz resolves to that m/z, with no composition or expected ratio."""
    ion = resolve(IonSpec(name="siloxane-445", mz=445.120025, search_ppm=30))
    assert ion.mz == 445.120025
    assert ion.composition is None
    assert ion.m1_ratio_expected is None
    assert ion.search_ppm == 30


@pytest.mark.parametrize(
    ("spec", "message"),
    [
        (IonSpec(name="x", formula="C8H10Qq"), "unknown element"),
        (IonSpec(name="x", formula="C8H(10"), "cannot read formula"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="+Xy"), "unknown element"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="H plus"), "cannot read adduct"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="-H2O"), "carries no charge"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="+H", charge=-1), "contradicts"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="[M+2H]2+", charge=3), "contradicts"),
        (IonSpec(name="x", formula="C8H10N4O2", adduct="[M+H]2+"), "states charge"),
        (IonSpec(name="x", formula="C8H10N4O2", charge=0), "charge must not be 0"),
        (IonSpec(name="x", formula="NaCl", adduct="-H", charge=-1), "removes more H"),
        (IonSpec(name="x", peptide="MRFAZ"), "unknown residue"),
        (IonSpec(name="x", peptide="MR-FA"), "one-letter"),
        (IonSpec(name="x", mz=-5.0), "mz must be > 0"),
        (IonSpec(name="x", mz=100.0, formula="CH4"), "exactly one of"),
        (IonSpec(name="x"), "exactly one of"),
        (IonSpec(name="x", mz=100.0, search_ppm=0), "search_ppm"),
    ],
)
def test_bad_ion_raises_clear_value_error(spec: IonSpec, message: str) -> None:
    """A bad formula, peptide, adduct or charge raises ValueError naming the ion and the fault."""
    with pytest.raises(ValueError, match=message) as caught:
        resolve(spec)
    assert "'x'" in str(caught.value)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize(
    ("observed", "theoretical", "ppm"),
    [(500.0005, 500.0, 1.0), (499.999, 500.0, -2.0), (445.120025, 445.120025, 0.0)],
)
def test_ppm_error_definition(observed: float, theoretical: float, ppm: float) -> None:
    """ppm error is (observed - theoretical) / theoretical x 1e6."""
    # common practice (DESIGN.md vocabulary: mass error definition)
    assert ppm_error(observed, theoretical) == pytest.approx(ppm, abs=1e-9)


GLUTATHIONE = IonSpec(name="glutathione", formula="C10H17N3O6S", adduct="+H")
CAFFEINE_H = IonSpec(name="caffeine", formula="C8H10N4O2", adduct="+H")


@pytest.mark.parametrize("resolving_power", [15_000, 30_000, 60_000, 120_000])
@pytest.mark.parametrize("spec", [CAFFEINE_H, GLUTATHIONE], ids=["caffeine", "glutathione"])
def test_expected_m1_ratio_matches_a_fine_structure_profile(
    spec: IonSpec, resolving_power: int
) -> None:
    """Profile spectra built from the exact M+1 fine structure (one Gaussian of FWHM m/z / R
    per isotopologue: 13C, 2H, 15N, 17O, 33S at their NIST mass offsets and abundances) read
    the M+1/M height the expectation gives at that resolving power, within 2 %. The whole
    nominal-mass cluster, the expectation without a resolving power, is 6-17 % too high for
    these N- and S-rich ions once the 15N and 33S peaks separate."""
    from tests.helpers.spectra import profile_arrays
    from watcher.measure.ions import C13_SPACING_DA, m1_isotopologues
    from watcher.measure.peaks import find_peak

    cluster = resolve(spec)
    at_r = resolve(spec, resolving_power=resolving_power)
    assert cluster.composition is not None
    composition = dict(cluster.composition)
    z = abs(cluster.charge)
    peaks = [(cluster.mz, 1.0e6)]
    peaks += [(cluster.mz + d / z, 1.0e6 * a) for d, a in m1_isotopologues(composition)]
    fwhm_ppm = 1e6 / resolving_power
    mz, intensity = profile_arrays(peaks, fwhm_ppm=fwhm_ppm, spacing_ppm=fwhm_ppm / 8)
    m0 = find_peak(mz, intensity, cluster.mz, 10.0, profile=True)
    m1 = find_peak(mz, intensity, cluster.mz + C13_SPACING_DA / z, 10.0, profile=True)
    assert m0 is not None
    assert m1 is not None
    observed = m1[1] / m0[1]
    assert at_r.m1_ratio_expected == pytest.approx(observed, rel=0.02)
    if resolving_power >= 60_000:
        assert cluster.m1_ratio_expected is not None
        assert cluster.m1_ratio_expected / observed - 1.0 > 0.06

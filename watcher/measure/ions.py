"""Ion m/z and expected isotope ratios from an IonSpec (bare m/z, formula + adduct, or peptide).

Masses come from the NIST nuclide table in ``watcher.measure.nuclides``; the ion's m/z is
computed here as (sum of nuclide masses - charge x electron mass) / |charge|, because pyteomics'
``charge_carrier='Na+'`` adds a neutral sodium atom and comes out one electron mass high.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from watcher.measure.nuclides import ELECTRON_MASS_DA as _ELECTRON_MASS_DA
from watcher.measure.nuclides import ELEMENTS, RESIDUES

if TYPE_CHECKING:
    from collections.abc import Mapping

    from watcher.config import IonSpec

ELECTRON_MASS_DA: float = _ELECTRON_MASS_DA
# 13C - 12C: the spacing of the M+1 peak of an organic ion at charge 1 (common practice).
_CARBON_DA = {a: m for a, m, _ab in ELEMENTS["C"][1]}
C13_SPACING_DA: float = _CARBON_DA[13] - _CARBON_DA[12]


@dataclass(frozen=True, slots=True, kw_only=True)
class ResolvedIon:
    """An ion ready to search for: theoretical m/z, signed charge and expected isotope ratios."""

    name: str
    mz: float
    charge: int  # signed: negative mode < 0
    composition: tuple[tuple[str, int], ...] | None  # the ion's elements; None for a bare m/z
    m1_ratio_expected: float | None  # (M+1)/M abundance ratio of nominal-mass clusters
    m2_ratio_expected: float | None
    search_ppm: float


# Adduct building blocks: what "+X" adds to the molecule and the charge it brings.
# "-H" removes a proton (charge -1); "+." and "-." remove or add an electron (radical ions).
_CHARGED_UNITS: dict[str, tuple[dict[str, int], int]] = {
    "H": ({"H": 1}, 1),
    "Li": ({"Li": 1}, 1),
    "Na": ({"Na": 1}, 1),
    "K": ({"K": 1}, 1),
    "NH4": ({"N": 1, "H": 4}, 1),
    "Cl": ({"Cl": 1}, -1),
    "Br": ({"Br": 1}, -1),
    "HCOO": ({"C": 1, "H": 1, "O": 2}, -1),
    "CH3COO": ({"C": 2, "H": 3, "O": 2}, -1),
}
_ADDUCT_TERM = re.compile(r"([+-])(\d*)([A-Z][A-Za-z0-9]*|\.)")
_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)|(\()|(\))(\d*)")


def ppm_error(mz_observed: float, mz_theoretical: float) -> float:
    """Mass error in ppm: (observed - theoretical) / theoretical x 1e6."""
    return (mz_observed - mz_theoretical) / mz_theoretical * 1e6


def resolve(spec: IonSpec, *, resolving_power: float | None = None) -> ResolvedIon:
    """Turn an IonSpec into an m/z, signed charge, composition and expected isotope ratios.

    A formula or peptide without an adduct is protonated (``+H``) for a positive charge and
    deprotonated (``-H``) for a negative one. ``charge: z`` with a single-charge adduct such as
    ``+H`` means z of them: [M+zH]z+. With ``resolving_power`` the expected M+1/M is the height
    ratio a profile spectrum of that resolution shows (``m1_height_ratio``), else the whole
    nominal-mass M+1 cluster.

    Raises:
        ValueError: a bad formula, peptide, adduct or charge; the one-line message names the ion.
    """
    given = [k for k in ("mz", "formula", "peptide") if getattr(spec, k) is not None]
    if len(given) != 1:
        raise ValueError(
            f"ion {spec.name!r}: give exactly one of mz, formula or peptide (got {given or 'none'})"
        )
    if spec.charge == 0:
        raise ValueError(f"ion {spec.name!r}: charge must not be 0")
    if not spec.search_ppm > 0:
        raise ValueError(f"ion {spec.name!r}: search_ppm must be > 0, got {spec.search_ppm}")
    if spec.mz is not None:
        if not spec.mz > 0:
            raise ValueError(f"ion {spec.name!r}: mz must be > 0, got {spec.mz}")
        return ResolvedIon(
            name=spec.name,
            mz=float(spec.mz),
            charge=spec.charge,
            composition=None,
            m1_ratio_expected=None,
            m2_ratio_expected=None,
            search_ppm=spec.search_ppm,
        )
    neutral = (
        _formula_composition(spec.name, spec.formula)
        if spec.formula is not None
        else _peptide_composition(spec.name, spec.peptide or "")
    )
    adduct = spec.adduct if spec.adduct is not None else ("+H" if spec.charge > 0 else "-H")
    delta, charge = _adduct_delta(spec.name, adduct, spec.charge)
    ion: dict[str, int] = dict(neutral)
    for element, count in delta.items():
        ion[element] = ion.get(element, 0) + count
    negative = sorted(e for e, n in ion.items() if n < 0)
    if negative:
        raise ValueError(
            f"ion {spec.name!r}: adduct {adduct!r} removes more {', '.join(negative)} "
            "than the molecule has"
        )
    ion = {e: n for e, n in ion.items() if n > 0}
    mz = ion_mz(ion, charge)
    m1, m2 = isotope_ratios(ion)
    if resolving_power is not None:
        m1 = m1_height_ratio(ion, charge, mz, resolving_power)
    return ResolvedIon(
        name=spec.name,
        mz=mz,
        charge=charge,
        composition=tuple(sorted(ion.items())),
        m1_ratio_expected=m1,
        m2_ratio_expected=m2,
        search_ppm=spec.search_ppm,
    )


def m1_isotopologues(composition: Mapping[str, int]) -> list[tuple[float, float]]:
    """The M+1 fine structure: (mass offset from M in Da, abundance relative to M) per element.

    Every M+1 isotopologue has exactly one atom replaced by its isotope one nominal mass up
    (13C, 2H, 15N, 17O, 33S, 29Si, ...): n x abundance(heavy) / abundance(light) relative to the
    monoisotopic ion, at the two nuclides' mass difference (NIST masses and abundances, from
    pyteomics' table). Summed they give ``isotope_ratios``' M+1/M to first order.
    """
    out: list[tuple[float, float]] = []
    for element, count in sorted(composition.items()):
        if count <= 0:
            continue
        mono_mass, nuclides = ELEMENTS[element]
        isotopes = {a: (m, ab) for a, m, ab in nuclides}
        mono_a = min(isotopes, key=lambda a: abs(isotopes[a][0] - mono_mass))
        heavy = isotopes.get(mono_a + 1)
        if heavy is None:
            continue
        out.append((heavy[0] - mono_mass, count * heavy[1] / isotopes[mono_a][1]))
    return out


def m1_height_ratio(
    composition: Mapping[str, int], charge: int, mz: float, resolving_power: float
) -> float:
    """The M+1/M height ratio a profile spectrum at ``resolving_power`` shows at the 13C peak.

    Each isotopologue is a Gaussian of FWHM = m/z / R; the M+1 height is the maximum of their
    sum near the 13C position, the M height that of the monoisotopic peak alone (its nearest
    neighbour is a whole nominal mass away). At R 30,000 caffeine [M+H]+ reads about 0.089, not
    the cluster's 0.103: its 15N isotopologue (6.3 mDa below 13C) is already a peak of its own.
    """
    fwhm_mz = mz / resolving_power
    z = abs(charge)
    lines = [(offset / z, abundance) for offset, abundance in m1_isotopologues(composition)]
    if not lines:
        return 0.0
    c13 = C13_SPACING_DA / z
    # The merged peak's apex moves towards a neighbour by less than half a width.
    grid = c13 + np.linspace(-0.5 * fwhm_mz, 0.5 * fwhm_mz, 401)
    total = np.zeros_like(grid)
    for offset, abundance in lines:
        total += abundance * np.exp(-4.0 * math.log(2.0) * ((grid - offset) / fwhm_mz) ** 2)
    return float(total.max())


def ion_mz(composition: Mapping[str, int], charge: int) -> float:
    """m/z of an ion of this elemental composition: (sum of nuclide masses - z x m_e) / |z|."""
    if charge == 0:
        raise ValueError("charge must not be 0")
    total_da = sum(n * ELEMENTS[e][0] for e, n in composition.items())
    return (total_da - charge * ELECTRON_MASS_DA) / abs(charge)


def isotope_ratios(composition: Mapping[str, int]) -> tuple[float, float]:
    """(M+1)/M and (M+2)/M from the full natural abundances of every element.

    Each element's isotopes are a polynomial in nominal-mass offset from its monoisotopic
    (most abundant) isotope; the molecule's distribution is the exact product of those
    polynomials, with no abundance threshold (so 2H and 17O count).
    """
    dist = np.ones(1, dtype=np.float64)
    low = 0  # nominal-mass offset of dist[0]
    for element, count in sorted(composition.items()):
        if count <= 0:
            continue
        probs, element_low = _element_distribution(element)
        dist = np.convolve(dist, _power(probs, count))
        low += element_low * count
    mono = -low
    m0 = float(dist[mono])
    m1 = float(dist[mono + 1]) if mono + 1 < dist.size else 0.0
    m2 = float(dist[mono + 2]) if mono + 2 < dist.size else 0.0
    return m1 / m0, m2 / m0


@lru_cache(maxsize=128)
def _element_distribution(element: str) -> tuple[np.ndarray[tuple[int], np.dtype[np.float64]], int]:
    """Abundances indexed by nominal-mass offset, and the offset of index 0 (<= 0)."""
    entry = ELEMENTS.get(element)
    if entry is None:
        raise ValueError(f"unknown element {element!r}")
    mono_mass, nuclides = entry
    isotopes = {a: ab for a, _m, ab in nuclides}
    masses = {a: m for a, m, _ab in nuclides}
    mono_a = min(isotopes, key=lambda a: abs(masses[a] - mono_mass))
    lo, hi = min(isotopes) - mono_a, max(isotopes) - mono_a
    probs = np.zeros(hi - lo + 1, dtype=np.float64)
    for a, ab in isotopes.items():
        probs[a - mono_a - lo] = ab
    return probs, lo


def _power(
    probs: np.ndarray[tuple[int], np.dtype[np.float64]], n: int
) -> np.ndarray[tuple[int], np.dtype[np.float64]]:
    """probs convolved with itself n times, by repeated squaring."""
    result = np.ones(1, dtype=np.float64)
    base = probs
    while n:
        if n & 1:
            result = np.convolve(result, base)
        n >>= 1
        if n:
            base = np.convolve(base, base)
    return result


def _formula_composition(name: str, formula: str) -> dict[str, int]:
    """Elements of a neutral formula such as ``C8H10N4O2`` or ``(C2H6SiO)6``."""
    text = formula.replace(" ", "")
    if not text:
        raise ValueError(f"ion {name!r}: formula is empty")
    try:
        composition = _expand_groups(text)
    except ValueError as exc:
        raise ValueError(f"ion {name!r}: cannot read formula {formula!r}") from exc
    for element in composition:
        if element not in ELEMENTS:
            raise ValueError(f"ion {name!r}: formula {formula!r} has unknown element {element!r}")
    return {e: int(n) for e, n in composition.items() if n}


def _expand_groups(text: str) -> dict[str, int]:
    stack: list[dict[str, int]] = [{}]
    pos = 0
    while pos < len(text):
        match = _FORMULA_TOKEN.match(text, pos)
        if match is None:
            raise ValueError(f"unexpected {text[pos]!r} at position {pos + 1}")
        element, count, opened, closed, group_count = match.groups()
        if element:
            stack[-1][element] = stack[-1].get(element, 0) + int(count or 1)
        elif opened:
            stack.append({})
        elif closed:
            if len(stack) == 1:
                raise ValueError("unbalanced ')'")
            group = stack.pop()
            times = int(group_count or 1)
            for e, n in group.items():
                stack[-1][e] = stack[-1].get(e, 0) + n * times
        pos = match.end()
    if len(stack) != 1:
        raise ValueError("unbalanced '('")
    return stack[0]


def _peptide_composition(name: str, peptide: str) -> dict[str, int]:
    """Elements of an unmodified peptide (one-letter codes, free termini H- and -OH)."""
    sequence = peptide.strip().upper()
    if not sequence.isalpha():
        raise ValueError(f"ion {name!r}: peptide {peptide!r} must be one-letter amino-acid codes")
    composition: dict[str, int] = {"H": 2, "O": 1}  # the free termini: H- and -OH
    for residue in sequence:
        elements = RESIDUES.get(residue)
        if elements is None:
            raise ValueError(
                f"ion {name!r}: peptide {peptide!r} has an unknown residue {residue!r}"
            )
        for element, n in elements.items():
            composition[element] = composition.get(element, 0) + n
    return {e: n for e, n in composition.items() if n}


def _adduct_delta(name: str, adduct: str, charge: int) -> tuple[dict[str, int], int]:
    """Elements the adduct adds (negative: removes) and the ion's signed charge."""
    text = adduct.replace(" ", "")
    stated_charge: int | None = None
    bracket = re.fullmatch(r"\[(.*)\](\d*)([+-])(\.?)", text)
    if bracket:
        text = bracket.group(1)
        stated_charge = int(bracket.group(2) or 1) * (1 if bracket.group(3) == "+" else -1)
    text = text.removeprefix("M")
    if bracket and not text and bracket.group(4):
        # "[M]+." / "[M]-.": the radical ion written with the charge outside the bracket.
        text = f"{bracket.group(3)}{bracket.group(2)}."
    terms = _ADDUCT_TERM.findall(text)
    if not terms or "".join(s + c + g for s, c, g in terms) != text:
        raise ValueError(
            f"ion {name!r}: cannot read adduct {adduct!r} "
            "(examples: +H, +Na, +K, +NH4, -H, +Cl, M+., M-.)"
        )
    delta: dict[str, int] = {}
    charged: list[tuple[dict[str, int], int, int]] = []  # (elements per unit, count, charge/unit)
    for sign_text, count_text, group in terms:
        sign = 1 if sign_text == "+" else -1
        count = int(count_text or 1)
        if group == ".":
            # Radical ion: an electron removed (+.) or added (-.); no atoms change.
            charged.append(({}, count, sign))
            continue
        if group in _CHARGED_UNITS:
            elements, unit_charge = _CHARGED_UNITS[group]
            charged.append(({e: sign * n for e, n in elements.items()}, count, sign * unit_charge))
            continue
        for e, n in _formula_composition(name, group).items():  # neutral gain or loss
            delta[e] = delta.get(e, 0) + sign * count * n
    if not charged:
        raise ValueError(f"ion {name!r}: adduct {adduct!r} carries no charge")
    net = sum(count * unit for _el, count, unit in charged)
    explicit = stated_charge is not None or any(count > 1 for _el, count, _u in charged)
    if len(charged) == 1 and not explicit and abs(charge) > 1:
        # "+H" with charge 3 means three protons: [M+3H]3+.
        elements, _count, unit = charged[0]
        charged = [(elements, abs(charge), unit)]
        net = abs(charge) * unit
    if net == 0:
        raise ValueError(f"ion {name!r}: adduct {adduct!r} leaves the ion neutral")
    if stated_charge is not None and stated_charge != net:
        raise ValueError(
            f"ion {name!r}: adduct {adduct!r} states charge {stated_charge}, sums to {net}"
        )
    # charge 1 is the config default, so it never contradicts an adduct that sets the charge.
    sign_conflict = charge != 1 and (charge < 0) != (net < 0)
    if abs(charge) not in (1, abs(net)) or sign_conflict:
        raise ValueError(
            f"ion {name!r}: charge {charge} contradicts adduct {adduct!r} (charge {net})"
        )
    for elements, count, _unit in charged:
        for e, n in elements.items():
            delta[e] = delta.get(e, 0) + count * n
    return delta, net

"""Mass limits of a phase: ``hydrogen_burning_limit`` (MS) and ``chandrasekhar_limit`` (WD)."""

from __future__ import annotations

import numpy as np

from catcheck.canonical import StarBatch
from catcheck.checks.base import (
    Check,
    Documentation,
    Outcome,
    Params,
    at_rows,
    excess_sigma,
    fixed_needs,
    fmt,
    phase_is,
)
from catcheck.physics.stellar import hydrogen_burning_minimum_mass

HYDROGEN_BURNING_DOC = Documentation(
    what="Flags a main-sequence star whose mass is below the hydrogen-burning minimum mass.",
    why="Below ~0.07-0.08 Msun the core never gets hot enough to burn hydrogen steadily: "
    "such an object is a brown dwarf and never joins the main sequence.  A main-sequence "
    "label on it is a phase error, or the mass is in the wrong unit (Jupiter masses).",
    formula="M_HBMM = 0.07 Msun at [M/H] >= -0.5, rising to 0.08 Msun at [M/H] <= -1.5 "
    "(solar [M/H] if none is given)\n"
    "flag when phase = MS and M_HBMM - M > threshold * sigma_M",
    caveats="The limit is model-dependent by ~0.005 Msun; the lower edge of the published "
    "range is used so that only clear cases are flagged.  Young brown dwarfs in star-forming "
    "regions are often labelled dwarfs by photometric pipelines.",
    example="An MS star of 0.05 +- 0.005 Msun at solar metallicity is 0.02 Msun below "
    "0.07 Msun, 4 sigma, and is flagged; 0.068 +- 0.005 Msun (0.4 sigma) is not.",
    references=("Chabrier & Baraffe (1997), A&A 327, 1039 (model family; values from memory)",),
)

CHANDRASEKHAR_DOC = Documentation(
    what="Flags a white dwarf more massive than the Chandrasekhar mass.",
    why="Electron degeneracy pressure cannot support a white dwarf above ~1.4 Msun: it "
    "collapses or explodes.  A heavier 'white dwarf' has a mass error, a unit error or the "
    "wrong phase label.",
    formula="M_Ch = omega_3 (sqrt(3 pi)/2) (hbar c / G)^(3/2) / (mu_e m_u)^2 = 1.456 Msun "
    "for mu_e = 2 (computed); the rule uses max_mass = 1.40 Msun, where realistic C/O and "
    "O/Ne white dwarfs become unstable\n"
    "flag when phase = WD and M - max_mass > threshold * sigma_M",
    caveats="Masses of white dwarfs from spectroscopic log g depend on the atmosphere and "
    "mass-radius models; magnetic white dwarfs and double degenerates (an unresolved pair) "
    "can carry inflated masses.",
    example="A WD of 1.6 +- 0.05 Msun is 0.2 Msun above 1.40 Msun, 4 sigma, and is flagged; "
    "1.35 +- 0.05 Msun is not.",
    references=(
        "Chandrasekhar (1931), ApJ 74, 81; (1939) An Introduction to the Study of Stellar "
        "Structure, ch. XI",
        "CODATA 2018 (hbar, c, G, atomic mass constant)",
    ),
)


def _mass_outside(batch: StarBatch, params: Params, phase: str, low: np.ndarray | float,
                  high: float, side: str) -> Outcome:
    """Outcome for 'mass of this phase outside [low, high]' in sigma of the mass error."""
    mass = batch.values["mass"]
    sigma = batch.error_or("mass", params["assumed_mass_fraction"] * np.abs(mass))
    applies = phase_is(batch, phase)
    deviation = excess_sigma(mass, sigma, low, high)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])
    limit = np.broadcast_to(np.asarray(high if side == "above" else low, dtype=float),
                            mass.shape)

    def describe(rows: np.ndarray) -> list[str]:
        return [
            f"{phase} star of M = {fmt(m)} +- {fmt(s)} Msun is {side} the limit {fmt(lim)} "
            f"Msun by {d:.1f} sigma"
            for m, s, lim, d in at_rows(rows, mass, sigma, limit, deviation)
        ]

    return Outcome(failed, describe, mass, limit.copy(), deviation, applies)


def evaluate_hydrogen_burning(batch: StarBatch, params: Params) -> Outcome:
    """Flag main-sequence stars below the hydrogen-burning minimum mass."""
    feh = batch.values.get("feh", np.full(batch.size, np.nan))
    return _mass_outside(batch, params, "MS", hydrogen_burning_minimum_mass(feh), np.inf,
                         "below")


def evaluate_chandrasekhar(batch: StarBatch, params: Params) -> Outcome:
    """Flag white dwarfs above the maximum white-dwarf mass."""
    return _mass_outside(batch, params, "WD", 0.0, params["max_mass"], "above")


HYDROGEN_BURNING = Check(
    name="hydrogen_burning_limit",
    needs=fixed_needs("mass", "phase"),
    evaluate=evaluate_hydrogen_burning,
    doc=HYDROGEN_BURNING_DOC,
    defaults={"threshold": 3.0, "assumed_mass_fraction": 0.10},
)

CHANDRASEKHAR = Check(
    name="chandrasekhar_limit",
    needs=fixed_needs("mass", "phase"),
    evaluate=evaluate_chandrasekhar,
    doc=CHANDRASEKHAR_DOC,
    defaults={"threshold": 3.0, "assumed_mass_fraction": 0.05, "max_mass": 1.40},
)

"""``ms_mass_luminosity``: a main-sequence star's luminosity must suit its mass."""

from __future__ import annotations

import numpy as np

from catcheck.canonical import StarBatch
from catcheck.checks.base import (
    Check,
    Documentation,
    Outcome,
    Params,
    at_rows,
    combined_sigma,
    excess_sigma,
    fixed_needs,
    fmt,
    phase_is,
)
from catcheck.physics.main_sequence import eker2018_log_luminosity_and_slope
from catcheck.physics.stellar import LN10

DOC = Documentation(
    what="Compares a main-sequence star's luminosity with the mass-luminosity relation, "
    "allowing for the brightening of main-sequence evolution and for binaries.",
    why="On the main sequence luminosity is set by mass (L ~ M^4 near 1 Msun): a 'main "
    "sequence' star far off the relation has a wrong mass, a wrong luminosity (distance, "
    "extinction) or is not on the main sequence at all.",
    formula="log L_MLR = a log M + b, six pieces over 0.179-31 Msun (Eker et al. 2018)\n"
    "allowed band: log L_MLR - band_below_dex .. log L_MLR + band_above_dex (stars "
    "brighten by up to ~0.5 dex from ZAMS to TAMS; metal-poor stars are brighter at fixed "
    "mass; unresolved equal-mass binaries add 0.3 dex)\n"
    "sigma^2 = s_logL^2 + (slope * s_M / (M ln10))^2 + intrinsic_dex^2\n"
    "flag when the distance outside the band exceeds threshold * sigma (MS rows with "
    "min_mass <= M <= max_mass only)",
    caveats="Kept at warning severity: unresolved binaries, blue stragglers (more massive "
    "than their cluster's turn-off but labelled MS), very young or metal-poor stars, fast "
    "rotators and stars seen through unmodelled extinction all leave the relation for real. "
    "The relation is calibrated on detached eclipsing binaries of mixed ages; it is not "
    "applied below 0.1 Msun (brown dwarfs have no mass-luminosity relation) or above "
    "60 Msun (where it meets the Eddington limit).",
    example="M = 2.0 Msun gives log L_MLR = 4.329 log 2 + 0.010 = 1.31.  A catalogue log L "
    "of 2.6 +- 0.05 with a 5% mass error is 0.79 dex above the band top (1.81), sigma "
    "0.13 dex: 6 sigma, flagged as a warning; log L 1.6 sits inside the band.",
    references=(
        "Eker Z. et al. (2018), MNRAS 479, 5491: interrelated main-sequence mass-luminosity "
        "relation (coefficients from memory)",
        "Bressan et al. (2012), MNRAS 427, 127 (PARSEC: ZAMS-TAMS brightening)",
    ),
)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag main-sequence rows far outside the mass-luminosity band."""
    mass = batch.values["mass"]
    applies = phase_is(batch, "MS") & (mass >= params["min_mass"]) & (
        mass <= params["max_mass"])
    observed = batch.log10("luminosity")
    expected, slope = eker2018_log_luminosity_and_slope(mass)
    s_logl = batch.log_sigma("luminosity", params["assumed_luminosity_dex"])
    s_logm = batch.log_sigma("mass", params["assumed_mass_fraction"] / LN10)
    sigma = combined_sigma(s_logl, slope * s_logm, params["intrinsic_dex"])
    low = expected - params["band_below_dex"]
    high = expected + params["band_above_dex"]
    deviation = excess_sigma(observed, sigma, low, high)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])

    def describe(rows: np.ndarray) -> list[str]:
        messages = []
        for m, o, lo, hi, d in at_rows(rows, mass, observed, low, high, deviation):
            side, edge = ("above", hi) if o > hi else ("below", lo)
            messages.append(
                f"MS star of M = {fmt(m)} Msun has log L = {o:.2f} dex(Lsun), {side} the "
                f"main-sequence band {lo:.2f}..{hi:.2f} dex(Lsun) by {abs(o - edge):.2f} "
                f"dex, {d:.1f} sigma"
            )
        return messages

    return Outcome(failed, describe, observed, expected, deviation, applies)


CHECK = Check(
    name="ms_mass_luminosity",
    needs=fixed_needs("luminosity", "mass", "phase"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 3.0,
        "band_below_dex": 0.3,
        "band_above_dex": 0.5,
        "intrinsic_dex": 0.1,
        "min_mass": 0.1,
        "max_mass": 60.0,
        "assumed_luminosity_dex": 0.1,
        "assumed_mass_fraction": 0.10,
    },
)

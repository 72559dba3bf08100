"""``stefan_boltzmann``: luminosity, radius and Teff must obey L = 4 pi R^2 sigma Teff^4."""

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
    fixed_needs,
    fmt,
    sigma_deviation,
)
from catcheck.physics.stellar import LN10, log_luminosity_stefan_boltzmann_log

DOC = Documentation(
    what="Compares the catalogued luminosity with the one implied by the catalogued radius "
    "and effective temperature.",
    why="Teff is defined through the Stefan-Boltzmann law, so L, R and Teff of one star "
    "cannot be chosen independently: a mismatch means one of the three is wrong (often a "
    "unit or log/linear mix-up, or values taken from different sources).",
    formula="log L = 2 log R + 4 log(Teff / 5772 K)   (solar units, IAU 2015 nominal values)\n"
    "sigma^2 = s_logL^2 + (2 s_R / (R ln10))^2 + (4 s_Teff / (Teff ln10))^2, "
    "sigma >= floor_dex\n"
    "flag when |log L_cat - log L_SB| > threshold * sigma",
    caveats="Exact by definition for a single star, but: an unresolved binary's combined "
    "luminosity with one component's radius and Teff reads up to 0.3 dex high; radii of very "
    "cool dwarfs (L/T types) are model-dependent; rapid rotators (gravity darkening) and "
    "stars with extended atmospheres have ill-defined radii; luminosities derived from "
    "photometry carry distance and extinction errors that catalogues often omit.",
    example="Teff = 5772 K, R = 1.0 Rsun predicts log L = 0.00; a catalogue log L of 0.50 "
    "with 0.05 dex error (R and Teff errors 2% each, adding 2 x 0.0087 = 0.017 and "
    "4 x 0.0087 = 0.035 dex) is 0.50 / 0.063 = 7.9 sigma off and is flagged.",
    references=(
        "Stefan (1879); Boltzmann (1884): L = 4 pi R^2 sigma T^4",
        "IAU 2015 Resolution B3 (nominal solar radius, luminosity, Teff)",
        "CODATA 2018 (Stefan-Boltzmann constant)",
    ),
)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose log L departs from 2 log R + 4 log(Teff/Teff_sun) by > threshold sigma."""
    radius = batch.values["radius"]
    teff = batch.values["teff"]
    observed = batch.log10("luminosity")
    expected = log_luminosity_stefan_boltzmann_log(batch.log10("radius"), batch.log10("teff"))
    s_logl = batch.log_sigma("luminosity", params["assumed_luminosity_dex"])
    s_logr = batch.log_sigma("radius", params["assumed_radius_fraction"] / LN10)
    s_logt = batch.log_sigma("teff", params["assumed_teff_fraction"] / LN10)
    sigma = combined_sigma(s_logl, 2.0 * s_logr, 4.0 * s_logt, params["intrinsic_dex"],
                           floor=params["floor_dex"])
    deviation, failed = sigma_deviation(observed, expected, sigma, params["threshold"])

    def describe(rows: np.ndarray) -> list[str]:
        return [
            f"log L = {o:.2f} dex(Lsun) but R = {fmt(r)} Rsun and Teff = {fmt(t)} K give "
            f"{e:.2f} dex(Lsun): off by {o - e:+.2f} dex, {d:.1f} sigma (sigma {s:.3f} dex)"
            for o, r, t, e, d, s in at_rows(rows, observed, radius, teff, expected, deviation,
                                            sigma)
        ]

    # zero or negative L, R or Teff have no logarithm: the range rules flag them
    applies = np.isfinite(observed) & np.isfinite(expected)
    return Outcome(failed & applies, describe, observed, expected, deviation, applies)


CHECK = Check(
    name="stefan_boltzmann",
    needs=fixed_needs("luminosity", "radius", "teff"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 5.0,
        "floor_dex": 0.02,
        "intrinsic_dex": 0.0,
        "assumed_luminosity_dex": 0.05,
        "assumed_radius_fraction": 0.05,
        "assumed_teff_fraction": 0.02,
    },
)

"""``surface_gravity``: log g, mass and radius must obey g = G M / R^2."""

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
from catcheck.physics.stellar import LN10, log_surface_gravity_log

DOC = Documentation(
    what="Compares the catalogued log g with the one implied by the catalogued mass and "
    "radius.",
    why="Surface gravity is G M / R^2 by definition; log g, M and R of one star cannot be "
    "chosen independently.  A mismatch often means log g from spectroscopy and M, R from "
    "isochrones or asteroseismology that disagree, a radius in the wrong unit, or a "
    "present mass confused with an initial mass.",
    formula="log g = 4.43807 + log(M/Msun) - 2 log(R/Rsun)   (cgs; IAU 2015 nominal "
    "(GM)_sun and R_sun)\n"
    "sigma^2 = s_logg^2 + (s_M / (M ln10))^2 + (2 s_R / (R ln10))^2, sigma >= floor_dex\n"
    "flag when |log g_cat - log g_MR| > threshold * sigma",
    caveats="Spectroscopic log g of giants carries 0.1-0.3 dex systematic errors that "
    "catalogues often understate; rapid rotators have a gravity that varies over the "
    "surface; for mass-losing massive stars the model mass may be the initial mass; an "
    "unresolved binary's spectroscopic log g belongs to the brighter star only.",
    example="M = 1 Msun, R = 1 Rsun give log g = 4.44.  A catalogue log g of 3.44 +- 0.1 "
    "with 5% errors on M and R (0.022 and 0.043 dex) is 1.0 / 0.11 = 8.9 sigma off and is "
    "flagged; log g 4.30 +- 0.1 (1.2 sigma) is not.",
    references=(
        "Newton's law of gravitation: g = G M / R^2",
        "IAU 2015 Resolution B3 (nominal (GM)_sun and R_sun)",
    ),
)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose log g departs from log(G M / R^2) by more than threshold sigma."""
    logg = batch.values["logg"]
    mass = batch.values["mass"]
    radius = batch.values["radius"]
    expected = log_surface_gravity_log(batch.log10("mass"), batch.log10("radius"))
    s_logg = batch.error_or("logg", params["assumed_logg_dex"])
    s_logm = batch.log_sigma("mass", params["assumed_mass_fraction"] / LN10)
    s_logr = batch.log_sigma("radius", params["assumed_radius_fraction"] / LN10)
    sigma = combined_sigma(s_logg, s_logm, 2.0 * s_logr, floor=params["floor_dex"])
    deviation, failed = sigma_deviation(logg, expected, sigma, params["threshold"])

    def describe(rows: np.ndarray) -> list[str]:
        return [
            f"log g = {g:.2f} dex(cm/s2) but M = {fmt(m)} Msun and R = {fmt(r)} Rsun give "
            f"{e:.2f} dex(cm/s2): off by {g - e:+.2f} dex, {d:.1f} sigma (sigma {s:.3f} dex)"
            for g, m, r, e, d, s in at_rows(rows, logg, mass, radius, expected, deviation,
                                            sigma)
        ]

    # zero or negative M or R have no logarithm: the range rules flag them
    applies = np.isfinite(expected)
    return Outcome(failed & applies, describe, logg, expected, deviation, applies)


CHECK = Check(
    name="surface_gravity",
    needs=fixed_needs("logg", "mass", "radius"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 5.0,
        "floor_dex": 0.05,
        "assumed_logg_dex": 0.15,
        "assumed_mass_fraction": 0.10,
        "assumed_radius_fraction": 0.05,
    },
)

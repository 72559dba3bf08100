"""``eddington_limit``: no star shines stably above the Eddington luminosity of its mass."""

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
)
from catcheck.physics.stellar import LN10, log_eddington_luminosity_log

DOC = Documentation(
    what="Flags a star more luminous than the Eddington luminosity of its catalogued mass.",
    why="Above L_Edd radiation pressure on free electrons exceeds gravity and the outer "
    "layers are blown away: no star is stable there.  A row above it usually has a mass in "
    "the wrong unit or a luminosity off by orders of magnitude.",
    formula="log L_Edd = log(4 pi G M c / kappa), kappa = 0.2 (1 + X) cm^2/g; the rule "
    "uses X = hydrogen_fraction = 0 by default, the highest (hydrogen-free) limit: "
    "6.53e4 M/Msun Lsun (3.84e4 for X = 0.7; computed)\n"
    "sigma^2 = s_logL^2 + (s_M / (M ln10))^2, sigma >= floor_dex\n"
    "flag when log L - log L_Edd > threshold * sigma",
    caveats="Very massive stars approach the limit; once they have lost their hydrogen-rich "
    "envelopes they exceed the X = 0.7 value (PARSEC v1.2S models of 60-130 Msun do, by up "
    "to 0.22 dex), which is why the default uses X = 0.  Raising hydrogen_fraction makes "
    "the rule stricter for hydrogen-rich stars only.  Luminous blue "
    "variables in eruption exceed it briefly; an unresolved multiple system's luminosity "
    "with one component's mass can exceed it.",
    example="M = 10 Msun gives L_Edd = 6.53e5 Lsun (log 5.81, X = 0).  A catalogue log L of "
    "6.4 +- 0.05 with a 5% mass error is 0.59 dex above, 0.59 / 0.055 = 11 sigma, and is "
    "flagged; a 40 Msun star at log L 5.9 is 0.52 dex below and is not.",
    references=(
        "Eddington (1926), The Internal Constitution of the Stars",
        "Kippenhahn, Weigert & Weiss (2012), Stellar Structure and Evolution, 2nd ed.",
        "IAU 2015 Resolution B3; CODATA 2018 (c)",
    ),
)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose log L exceeds log L_Edd(M) by more than threshold sigma."""
    mass = batch.values["mass"]
    observed = batch.log10("luminosity")
    expected = log_eddington_luminosity_log(batch.log10("mass"), params["hydrogen_fraction"])
    s_logl = batch.log_sigma("luminosity", params["assumed_luminosity_dex"])
    s_logm = batch.log_sigma("mass", params["assumed_mass_fraction"] / LN10)
    sigma = combined_sigma(s_logl, s_logm, floor=params["floor_dex"])
    with np.errstate(invalid="ignore"):
        deviation = (observed - expected) / sigma
        failed = deviation > params["threshold"]

    def describe(rows: np.ndarray) -> list[str]:
        return [
            f"log L = {o:.2f} dex(Lsun) exceeds the Eddington luminosity of M = {fmt(m)} "
            f"Msun, log L_Edd = {e:.2f} dex(Lsun), by {o - e:.2f} dex, {d:.1f} sigma"
            for o, e, m, d in at_rows(rows, observed, expected, mass, deviation)
        ]

    # zero or negative L or M have no logarithm: the range rules flag them
    applies = np.isfinite(observed) & np.isfinite(expected)
    return Outcome(failed & applies, describe, observed, expected, np.abs(deviation), applies)


CHECK = Check(
    name="eddington_limit",
    needs=fixed_needs("luminosity", "mass"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 3.0,
        "floor_dex": 0.05,
        "hydrogen_fraction": 0.0,
        "assumed_luminosity_dex": 0.1,
        "assumed_mass_fraction": 0.10,
    },
)

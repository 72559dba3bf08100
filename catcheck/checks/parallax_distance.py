"""``parallax_distance``: a catalogued distance must agree with the catalogued parallax."""

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
    sigma_deviation,
)
from catcheck.physics.stellar import distance_from_parallax

DOC = Documentation(
    what="Compares the catalogued distance with the inverse of the catalogued parallax, for "
    "stars whose parallax is measured to better than 1 part in min_parallax_snr.",
    why="Distance and parallax of one star measure the same thing.  Disagreement means the "
    "distance came from another source (photometric, cluster mean), a unit slip (mas vs "
    "arcsec, pc vs kpc), or columns from different stars joined on a bad match.",
    formula="d_plx = 1000 / parallax[mas]; s_d_plx = 1000 s_plx / parallax^2 with s_plx^2 "
    "= s_cat^2 + systematic_parallax_mas^2\n"
    "sigma^2 = s_d^2 + s_d_plx^2; applies where parallax / s_plx >= min_parallax_snr\n"
    "flag when |d - d_plx| > threshold * sigma",
    caveats="Inverting a parallax is biased when parallax / error < ~5, so such rows are "
    "not checked.  Parallax zero-point offsets of a few hundredths of a mas (survey- and "
    "magnitude-dependent) matter for distant stars; a cluster distance assigned to every "
    "member differs from individual parallaxes by the cluster's depth; distances from "
    "Bayesian priors are not 1/parallax by design.",
    example="parallax 2.00 +- 0.02 mas gives 500 +- 5 pc (with a 0.02 mas systematic, "
    "+- 7 pc).  A catalogued 650 +- 20 pc is 150 / 21 = 7 sigma off and is flagged; "
    "510 +- 20 pc is not.",
    references=("Bailer-Jones (2015), PASP 127, 994 (inverting parallaxes)",),
)


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose distance disagrees with 1000/parallax, where the parallax is good."""
    parallax = batch.values["parallax"]
    distance = batch.values["distance"]
    s_plx_cat = batch.error_or("parallax", params["assumed_parallax_error_mas"])
    s_plx = np.hypot(s_plx_cat, params["systematic_parallax_mas"])
    expected = distance_from_parallax(parallax)
    with np.errstate(divide="ignore", invalid="ignore"):
        applies = parallax / s_plx >= params["min_parallax_snr"]
        s_expected = 1000.0 * s_plx / parallax**2
    s_d = batch.error_or("distance", params["assumed_distance_fraction"] * np.abs(distance))
    sigma = combined_sigma(s_d, s_expected)
    deviation, failed = sigma_deviation(distance, expected, sigma, params["threshold"])
    failed &= applies

    def describe(rows: np.ndarray) -> list[str]:
        return [
            f"distance {d:.4g} pc but parallax {p:.4g} +- {sp:.2g} mas gives {e:.4g} pc: "
            f"{z:.1f} sigma (sigma {s:.3g} pc)"
            for d, p, sp, e, z, s in at_rows(rows, distance, parallax, s_plx_cat, expected,
                                             deviation, sigma)
        ]

    return Outcome(failed, describe, distance, expected, deviation, applies)


CHECK = Check(
    name="parallax_distance",
    needs=fixed_needs("parallax", "distance"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 5.0,
        "min_parallax_snr": 5.0,
        "systematic_parallax_mas": 0.02,
        "assumed_parallax_error_mas": 0.1,
        "assumed_distance_fraction": 0.05,
    },
)

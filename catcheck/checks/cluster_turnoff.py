"""``cluster_turnoff_age``: a cluster's age against the masses of its own evolved members."""

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
    phase_is,
    spread_at,
)
from catcheck.checks.cluster_members import (
    CLUSTER_LOG_AGE,
    MEDIAN_EFFICIENCY,
    cluster_log_age,
)
from catcheck.checks.evolution import GIANT_PHASES, lifetime_mass, metallicity
from catcheck.groups import group_labels_at
from catcheck.physics.evolution import log_main_sequence_lifetime

NAME = "cluster_turnoff_age"


def implied_log_age(batch: StarBatch) -> np.ndarray:
    """For evolved members, log10 of the main-sequence lifetime of their mass; else NaN.

    A star that has just left the main sequence is as old as its main-sequence lifetime,
    so the evolved members of a cluster date it.
    """
    evolved = np.flatnonzero(phase_is(batch, *GIANT_PHASES))
    mass, _ = lifetime_mass(batch, evolved)
    return spread_at(evolved, batch.size,
                     log_main_sequence_lifetime(mass, metallicity(batch, evolved)))


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag evolved members whose cluster age disagrees with the age their masses imply."""
    implied_summary, codes = batch.group_summary(NAME)
    age_summary, _ = batch.group_summary(CLUSTER_LOG_AGE)  # the members' median age
    # the terms of the cluster alone, once per cluster, then looked up for each row
    count, implied, spread = implied_summary.tables()
    with np.errstate(invalid="ignore", divide="ignore"):
        centre_error = MEDIAN_EFFICIENCY * spread / np.sqrt(count)
    _, cluster_log_ages, _ = age_summary.tables()
    log_age = age_summary.lookup(cluster_log_ages, codes)
    sigma = combined_sigma(batch.log_sigma("age", params["assumed_age_dex"]),
                           implied_summary.lookup(centre_error, codes),
                           params["intrinsic_dex"], floor=params["floor_dex"])
    deviation = excess_sigma(log_age, sigma,
                             implied_summary.lookup(implied - params["band_below_dex"], codes),
                             implied_summary.lookup(implied + params["band_above_dex"], codes))
    applies = phase_is(batch, *GIANT_PHASES) & implied_summary.lookup(
        count >= params["min_evolved"], codes)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])
        beyond = deviation > params["error_threshold"]
    row_implied = implied_summary.lookup(implied, codes)

    def describe(rows: np.ndarray) -> list[str]:
        groups = group_labels_at(batch.groups, rows)
        return [
            f"cluster {g} is catalogued at {10 ** a / 1e9:.3g} Gyr, but its {n:.0f} evolved "
            f"members' masses imply {10 ** m / 1e9:.3g} Gyr (median main-sequence "
            f"lifetime): {d:.1f} sigma"
            for g, (a, m, d), n in zip(
                groups, at_rows(rows, log_age, row_implied, deviation),
                implied_summary.lookup(count, codes[rows]).astype(float).tolist(),
                strict=True)
        ]

    return Outcome(failed, describe, log_age, row_implied, deviation, applies, beyond)


CHECK = Check(
    name=NAME,
    needs=fixed_needs("age", "mass", "phase"),
    evaluate=evaluate,
    escalates=True,
    group_variables={NAME: implied_log_age, CLUSTER_LOG_AGE: cluster_log_age},
    doc=Documentation(
        what="Compares each cluster's age (the median of its members' catalogued ages) "
        "with the age implied by its own "
        "evolved members (SGB, RGB, RC, HB, CHEB): the median main-sequence lifetime of "
        "their masses.  The evolved members are flagged, naming the cluster.",
        why="Stars just past the main sequence have lived their main-sequence lifetime, so "
        "the most evolved members date a cluster.  A cluster age far from theirs means the "
        "age, the masses or the membership is wrong.",
        formula="implied = median over evolved members of log t_MS(M, [M/H]) (PARSEC "
        "v1.2S; initial mass where given, else present mass)\n"
        "band: implied - band_below_dex .. implied + band_above_dex (present masses of "
        "giants are below their initial masses, so implied ages run old; evolved stars "
        "are older than t_MS by their post-main-sequence time)\n"
        "sigma^2 = s_logage^2 + (1.2533 spread / sqrt(n))^2 + intrinsic_dex^2\n"
        "warning when log age lies more than threshold * sigma outside the band; error "
        "beyond error_threshold (clusters with >= min_evolved evolved members)",
        caveats="Field giants in a membership list, blue-straggler descendants and binary "
        "products have masses that do not date the cluster; the median resists a few of "
        "them.  Giant masses from scaling relations or isochrones carry 10-20% errors.",
        example="A cluster catalogued at 2 Gyr whose 12 red giants have median initial "
        "mass 3.0 Msun (t_MS ~0.38 Gyr at solar [M/H]): 0.72 dex older than they imply, "
        "0.57 dex beyond the band top, sigma ~0.13 dex: 4.4 sigma, a warning.",
        references=("Bressan et al. (2012), MNRAS 427, 127: PARSEC v1.2S isochrones",),
    ),
    defaults={"threshold": 3.0, "error_threshold": 5.0, "intrinsic_dex": 0.08,
              "floor_dex": 0.05, "assumed_age_dex": 0.1, "band_below_dex": 0.3,
              "band_above_dex": 0.15, "min_evolved": 3.0},
)

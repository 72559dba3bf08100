"""Cluster-member checks: a member's value against its group's robust centre.

``cluster_parallax_outlier``, ``cluster_metallicity_outlier`` and ``cluster_age_spread``
share one shape: pass 1 of the group pass gives each group's median and robust spread
(1.4826 MAD) of a quantity; pass 2 flags members far from the median in combined sigma of
the member's own error, the cluster's intrinsic spread and the uncertainty of the median.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

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
from catcheck.groups import group_labels_at

#: the standard error of a median is sqrt(pi/2) = 1.2533 times that of a mean (normal data)
MEDIAN_EFFICIENCY = 1.2533


@dataclass(frozen=True)
class MemberQuantity:
    """How a member check reads its quantity: values, 1-sigma and intrinsic spread.

    ``intrinsic`` is a function of the group's median (an array by group, NaN for none).
    """

    label: str
    unit: str
    values: Callable[[StarBatch], np.ndarray]
    sigma: Callable[[StarBatch, Params], np.ndarray]
    intrinsic: Callable[[Params, np.ndarray], np.ndarray | float]


def member_check(name: str, quantity: str, member: MemberQuantity, doc: Documentation,
                 defaults: dict, variable: str | None = None) -> Check:
    """A check flagging members far from their group's median of ``member``.

    ``variable`` names the group statistic (default: the check's name); checks that
    aggregate the same quantity share one name, so pass 1 samples it once.
    """
    variable = variable or name

    def evaluate(batch: StarBatch, params: Params) -> Outcome:
        values = member.values(batch)
        summary, codes = batch.group_summary(variable)
        # the terms of the group alone, once per group, then looked up for each row
        count, median, spread = summary.tables()
        with np.errstate(invalid="ignore", divide="ignore"):
            centre_error = MEDIAN_EFFICIENCY * spread / np.sqrt(count)
        intrinsic = member.intrinsic(params, median)
        if np.ndim(intrinsic):
            intrinsic = summary.lookup(intrinsic, codes)
        sigma = combined_sigma(member.sigma(batch, params), intrinsic,
                               summary.lookup(centre_error, codes), floor=params["floor"])
        row_median = summary.lookup(median, codes)
        deviation, failed = sigma_deviation(values, row_median, sigma, params["threshold"])
        applies = summary.lookup(count >= params["min_members"], codes)
        failed &= applies

        # a spread of logarithms is a plain ratio: dex, whatever the values' unit
        width_unit = "dex" if member.unit.startswith("dex") else member.unit

        def describe(rows: np.ndarray) -> list[str]:
            groups = group_labels_at(batch.groups, rows)
            group_count, _, group_spread = summary.at(codes[rows])
            return [
                f"{member.label} {fmt(v)} {member.unit} is {d:.1f} sigma from the median "
                f"{fmt(m)} {member.unit} of group {g} (n = {n:.0f}, spread {fmt(s)} "
                f"{width_unit}, sigma {fmt(sg)} {width_unit})"
                for g, (v, m, d, sg), n, s in zip(
                    groups, at_rows(rows, values, row_median, deviation, sigma),
                    group_count.astype(float).tolist(), group_spread.tolist(), strict=True)
            ]

        return Outcome(failed, describe, values, row_median, deviation, applies)

    return Check(name=name, needs=fixed_needs(quantity), evaluate=evaluate, doc=doc,
                 defaults=defaults, group_variables={variable: member.values})


#: the group statistic of members' log ages, shared by every rule that needs a cluster's age
CLUSTER_LOG_AGE = "cluster_log_age"


def cluster_log_age(batch: StarBatch) -> np.ndarray:
    """log10 of each member's age (yr): pass 1 turns it into its cluster's median age."""
    return batch.log10("age")


PARALLAX = MemberQuantity(
    "parallax", "mas",
    values=lambda batch: batch.values["parallax"],
    sigma=lambda batch, params: batch.error_or("parallax", params["assumed_error"]),
    # a cluster of depth D (pc) at parallax p (mas) spreads parallaxes by p^2 D / 1000
    intrinsic=lambda params, median: np.abs(median) ** 2 * params["depth_pc"] / 1000.0,
)
METALLICITY = MemberQuantity(
    "[Fe/H]", "dex",
    values=lambda batch: batch.values["feh"],
    sigma=lambda batch, params: batch.error_or("feh", params["assumed_error"]),
    intrinsic=lambda params, median: params["intrinsic_dex"],
)
AGE = MemberQuantity(
    "log age", "dex(yr)",
    values=cluster_log_age,
    sigma=lambda batch, params: batch.log_sigma("age", params["assumed_error"]),
    intrinsic=lambda params, median: params["intrinsic_dex"],
)

_NON_MEMBERS = ("Field stars wrongly kept in a membership list are the usual cause, and "
                "are exactly what this rule is for; it is kept at warning severity because "
                "the tool cannot tell a non-member from a member with a bad measurement.")

PARALLAX_CHECK = member_check(
    "cluster_parallax_outlier", "parallax", PARALLAX,
    Documentation(
        what="Flags a cluster member whose parallax is far from its cluster's median "
        "parallax, given its error and the cluster's depth.",
        why="Members of one cluster lie at nearly one distance: a member at a clearly "
        "different parallax is a foreground or background star, or a mismatched row.",
        formula="centre = median(parallax of members), spread = 1.4826 MAD; depth term "
        "= centre^2 * depth_pc / 1000 mas\n"
        "sigma^2 = s_plx^2 + depth^2 + (1.2533 spread / sqrt(n))^2, sigma >= floor\n"
        "flag when |plx - centre| > threshold * sigma (groups of >= min_members)",
        caveats=_NON_MEMBERS + " Nearby, extended clusters and associations are deeper "
        "than depth_pc; wide binaries have orbital parallax wobble; parallax zero points "
        "vary across the sky.",
        example="A cluster at 2.000 mas (500 pc) with depth_pc = 20 has a depth term of "
        "0.08 mas.  A member at 2.60 +- 0.03 mas is 0.60 / 0.085 = 7 sigma off and is "
        "flagged; 2.10 +- 0.03 mas (1.2 sigma) is not.",
        references=("Median and MAD as robust estimators: Rousseeuw & Croux (1993), JASA "
                    "88, 1273 (common practice)",),
    ),
    {"threshold": 5.0, "depth_pc": 20.0, "assumed_error": 0.1, "floor": 0.01,
     "min_members": 5.0},
)

METALLICITY_CHECK = member_check(
    "cluster_metallicity_outlier", "feh", METALLICITY,
    Documentation(
        what="Flags a cluster member whose [Fe/H] is far from its cluster's median.",
        why="Open clusters are chemically homogeneous to a few hundredths of a dex: a "
        "member far off the cluster's metallicity is a non-member or a bad abundance.",
        formula="centre = median([Fe/H] of members), spread = 1.4826 MAD\n"
        "sigma^2 = s_FeH^2 + intrinsic_dex^2 + (1.2533 spread / sqrt(n))^2, sigma >= floor\n"
        "flag when |[Fe/H] - centre| > threshold * sigma (groups of >= min_members)",
        caveats=_NON_MEMBERS + " Spectroscopic pipelines are less reliable for very hot "
        "stars, fast rotators, cool dwarfs and giants than for FGK dwarfs; atomic diffusion "
        "lowers surface abundances of turn-off stars by ~0.1 dex.",
        example="A cluster at [Fe/H] = 0.00 (spread 0.05, n = 100): a member at -0.60 "
        "+- 0.08 dex is 0.60 / 0.094 = 6.4 sigma off and is flagged.",
        references=("Chemical homogeneity of open clusters to <= 0.03-0.05 dex: e.g. "
                    "Bovy (2016), ApJ 817, 49 (from memory)",),
    ),
    {"threshold": 5.0, "intrinsic_dex": 0.05, "assumed_error": 0.1, "floor": 0.02,
     "min_members": 5.0},
)

AGE_CHECK = member_check(
    "cluster_age_spread", "age", AGE,
    Documentation(
        what="Flags a cluster member whose own age is incoherent with its cluster's median "
        "member age.",
        why="A cluster's stars formed together: their ages agree to within the cluster's "
        "formation spread (a few Myr).  A member whose age estimate disagrees is a "
        "non-member or its age (often an isochrone fit) is wrong.",
        formula="in log age: centre = median(log age of members), spread = 1.4826 MAD\n"
        "sigma^2 = s_logage^2 + intrinsic_dex^2 + (1.2533 spread / sqrt(n))^2, "
        "sigma >= floor\n"
        "flag when |log age - centre| > threshold * sigma (groups of >= min_members)",
        caveats=_NON_MEMBERS + " Ages of individual main-sequence stars from isochrones "
        "are poorly constrained (often 0.3 dex or worse) and catalogues understate their "
        "errors; blue stragglers and binaries look younger; a cluster age copied to every "
        "member makes this rule trivially pass.",
        example="A cluster with median log age 9.00 (spread 0.05 dex, n = 50): a member "
        "at log age 8.00 +- 0.1 dex is 1.0 / 0.15 = 6.7 sigma off and is flagged.",
        references=("Lada & Lada (2003), ARA&A 41, 57: embedded clusters form within a "
                    "few Myr (from memory)",),
    ),
    {"threshold": 5.0, "intrinsic_dex": 0.1, "assumed_error": 0.1,
     "floor": 0.02, "min_members": 5.0},
    variable=CLUSTER_LOG_AGE,
)

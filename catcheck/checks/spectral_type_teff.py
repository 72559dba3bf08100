"""``spectral_type_teff``: the catalogued Teff must fit the star's MK spectral type."""

from __future__ import annotations

from functools import cache

import numpy as np
import pyarrow as pa

from catcheck.canonical import StarBatch
from catcheck.checks.base import (
    Check,
    Documentation,
    Outcome,
    Params,
    combined_sigma,
    excess_sigma,
    fixed_needs,
    fmt,
    spread_at,
)
from catcheck.physics.spectral import (
    SCALE_NAMES,
    SCALES_FOR_GROUP,
    LuminosityGroup,
    SpectralTypes,
    TypeKind,
    parse_spectral_types,
    teff_scale,
    type_teff_bands,
)
from catcheck.physics.stellar import LN10

DOC = Documentation(
    what="Compares the catalogued effective temperature with the Teff that the catalogued "
    "MK spectral type implies, on the scale of the star's luminosity class: dwarfs on the "
    "mean dwarf sequence, giants and supergiants on their own scales; a type without a "
    "luminosity class (and a subgiant) is compared with the dwarf and the giant scale and "
    "flagged only when far from both.",
    why="The MK temperature sequence O-B-A-F-G-K-M(-L-T-Y) is defined by line ratios that "
    "track the photospheric temperature, so type and Teff of one star measure the same "
    "thing two ways. A large mismatch means one of them is wrong: a Teff in the wrong unit "
    "or column, a type or a Teff belonging to another star (cross-match error), or a "
    "photometric Teff spoilt by extinction.",
    formula="t = type index (O0 = 0, B0 = 10, ..., M0 = 60, L0 = 70, T0 = 80, Y0 = 90); each "
    "scale is interpolated linearly in log Teff over t; ranges (G2/3, IV-V) are averaged.\n"
    "band of scale s: log T_s(t + w) .. log T_s(t - w), w = type_tolerance subtypes "
    "(uncertain_type_tolerance for types marked ':' or '?')\n"
    "excess_s = max(log T_s(t + w) - log Teff, log Teff - log T_s(t - w), 0)\n"
    "sigma_s^2 = (s_Teff / (Teff ln10))^2 + scatter_s^2, sigma_s >= floor_dex; s_Teff is "
    "the catalogue's error or assumed_teff_fraction * Teff; scatter_s is dwarf_scatter_dex, "
    "giant_scatter_dex or supergiant_scatter_dex\n"
    "deviation = min over the scales of the luminosity group of excess_s / sigma_s; flag when "
    "deviation > threshold. Scales: IV-V, V -> dwarf; III-IV, IV and no class -> dwarf or "
    "giant; II, II-III, III -> giant; 0, Ia+, Ia, Iab, Ib, I-II -> supergiant.\n"
    "Not applicable (counted as skipped, never flagged): unparseable strings, types without "
    "a subtype, white dwarfs, Wolf-Rayet, carbon (C, R, N) and S stars, chemically peculiar "
    "(Am notation such as kA2hA5mA7V, suffixes m, p, Si, Sr, Cr, Eu, Hg, He), composite "
    "spectra (G2V+K1V, comp, SB2), subdwarfs (VI, sd, including sdB/sdO), and types the "
    "scales do not cover (dwarfs O3-Y4, giants O3-M8, supergiants O3-M5).",
    caveats="Extinction does not change a Teff measured from line ratios in a spectrum, but "
    "it cools a photometric Teff (from colours): a strongly reddened star with a photometric "
    "Teff can be flagged although its type is right; the Teff is then wrong, not the "
    "physics. Binaries with composite spectra: the type describes the brighter star in the "
    "blue while an SED-fitted Teff mixes both; types written as composites are skipped, "
    "unmarked ones are not. Peculiar and chemically peculiar stars (Am, Ap/Bp, HgMn, "
    "He-weak/strong) are typed from abnormal lines and are skipped when the type says so. "
    "Classification is uncertain by about one subtype (more from low-resolution surveys); "
    "the band plus the threshold let an honest error of one subtype pass everywhere on the "
    "scales, but a type off by two or more subtypes where Teff changes fast (B1-B3, late T, "
    "Y) may be flagged. Giants versus dwarfs: G-K giants are a few hundred K cooler than "
    "dwarfs of the same type and mid-late M giants warmer; a wrong luminosity class can "
    "flag a star, which is why stars without a class are compared with both scales. The "
    "giant and supergiant scales were typed from memory and carry wider scatter; metal-poor "
    "giants are typed earlier than their Teff (weak lines) by up to a few subtypes, and "
    "pre-main-sequence G5-K6 stars are ~250 K cooler than dwarfs of the same type (Pecaut & "
    "Mamajek 2013), both within the default tolerance but adding up with other errors.",
    example="A G2V star (mean dwarf scale 5770 K; 5745-5815 K for G1.5-G2.5) catalogued at "
    "3000 K without an error: 3% assumed (0.0130 dex) and dwarf scatter 0.02 dex give sigma "
    "0.0239 dex; log(5745 / 3000) = 0.282 dex below the band is 11.8 sigma and is flagged. "
    "At 5500 K it is 0.019 dex below the band, 0.8 sigma, and passes; an M5V at 9000 K "
    "(dwarf scale 3060 K; 2930-3110 K for M4.5-M5.5) is 0.46 dex above its band, 19 sigma.",
    references=(
        "Pecaut & Mamajek 2013, ApJS 208, 9, Table 5, updated table "
        "EEM_dwarf_UBVIJHK_colors_Teff.txt version 2022.04.16 (E. Mamajek): dwarf scale",
        "giant scale from memory, after Ridgway et al. 1980 (lunar occultations, K0-M6), "
        "Perrin et al. 1998, A&A 331, 619 (M6-M8), van Belle et al. 2021, ApJ 922, 163",
        "supergiant scale from memory, after Levesque et al. 2005, ApJ 628, 973 (red "
        "supergiants), Crowther, Lennon & Walborn 2006 and Markova & Puls 2008 (B supergiants)",
        "Morgan, Keenan & Kellman 1943, An Atlas of Stellar Spectra; Gray & Corbally 2009, "
        "Stellar Spectral Classification (the MK notation)",
    ),
)

#: how a luminosity group reads in a message
_GROUP_TEXT = {
    LuminosityGroup.DWARF: "dwarf",
    LuminosityGroup.SUBGIANT: "subgiant",
    LuminosityGroup.GIANT: "giant",
    LuminosityGroup.SUPERGIANT: "supergiant",
    LuminosityGroup.UNKNOWN: "no luminosity class",
}


@cache
def _which(scale_position: int, group: int) -> str:
    """Names the scale a row was compared with, for its message."""
    label = teff_scale(SCALE_NAMES[scale_position]).label
    if len(SCALES_FOR_GROUP[LuminosityGroup(group)]) > 1:
        return f"the closer of the dwarf and giant scales, the {label},"
    return f"the {label}"


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose Teff lies > threshold sigma outside the band of their type's scale.

    Only rows with a usable MK type and a Teff are computed (often a minority of a
    catalogue); the rest are not applicable.
    """
    all_types = parse_spectral_types(batch.text["spectral_type"])
    usable = all_types.values("kind") == TypeKind.MK
    typed = np.flatnonzero(usable[all_types.codes] & ~np.isnan(batch.values["teff"]))
    types = SpectralTypes(all_types.distinct, all_types.codes[typed])
    spectral = batch.text["spectral_type"]
    teff = batch.values["teff"][typed]
    group = types.values("group")
    index = types.values("index")
    half_width = np.where(types.values("uncertain"), params["uncertain_type_tolerance"],
                          params["type_tolerance"])
    with np.errstate(divide="ignore", invalid="ignore"):
        log_teff = np.log10(teff)
        s_teff = batch.error_or("teff", params["assumed_teff_fraction"] * batch.values["teff"]
                                )[typed] / (teff * LN10)

    bands = type_teff_bands(np.where(usable, index, np.nan), group, half_width)
    cool_by_scale, hot_by_scale = types.rows(bands.cool), types.rows(bands.hot)
    scatter = np.array([[params[f"{name}_scatter_dex"]] for name in SCALE_NAMES])
    sigma_by_scale = combined_sigma(s_teff, scatter, floor=params["floor_dex"])
    deviation_by_scale = excess_sigma(np.broadcast_to(log_teff, cool_by_scale.shape),
                                      sigma_by_scale, cool_by_scale, hot_by_scale)
    deviation_by_scale[np.isnan(cool_by_scale) | np.isnan(deviation_by_scale)] = np.inf
    # the scale the row fits best (argmin over scales; rows at inf on all scales fit none)
    chosen = np.argmin(deviation_by_scale, axis=0)

    def pick(by_scale: np.ndarray) -> np.ndarray:
        return np.take_along_axis(by_scale, chosen[np.newaxis], axis=0)[0]

    typed_deviation = pick(deviation_by_scale)
    typed_deviation[~np.isfinite(typed_deviation)] = np.nan
    cool, hot, sigma = pick(cool_by_scale), pick(hot_by_scale), pick(sigma_by_scale)
    typed_expected = 10.0 ** bands.centre[chosen, types.codes]
    deviation = spread_at(typed, batch.size, typed_deviation)
    expected = spread_at(typed, batch.size, typed_expected)
    applies = ~np.isnan(deviation)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])
    row_half_width = types.rows(half_width)
    row_group = types.rows(group)
    position = np.full(batch.size, -1, dtype=np.intp)
    position[typed] = np.arange(len(typed))

    def describe(rows: np.ndarray) -> list[str]:
        rows = np.asarray(rows, dtype=np.intp)
        labels = spectral.take(pa.array(rows, type=pa.int64())).to_pylist()
        at = position[rows]
        # plain Python values: formatting them is much faster than numpy scalars
        columns = (teff, typed_expected, 10.0**cool, 10.0**hot, log_teff - hot,
                   cool - log_teff, typed_deviation, sigma, row_half_width)
        values = zip(*(np.asarray(c, dtype=float)[at].tolist() for c in columns),
                     chosen[at].tolist(), row_group[at].tolist(), strict=True)
        return [
            f"{label} ({_GROUP_TEXT[group_k]}): Teff {fmt(t)} K, but "
            f"{_which(scale_k, group_k)} gives {e:.0f} K for this type ({lo:.0f}-{hi:.0f} K "
            f"within {w:g} subtype); "
            f"{max(above, below):.2f} dex {'hotter' if above > 0 else 'cooler'}, "
            f"{dev:.1f} sigma (sigma {s:.3f} dex)"
            for label, (t, e, lo, hi, above, below, dev, s, w, scale_k, group_k)
            in zip(labels, values, strict=True)
        ]

    return Outcome(failed, describe, batch.values["teff"], expected, deviation, applies)


CHECK = Check(
    name="spectral_type_teff",
    needs=fixed_needs("spectral_type", "teff"),
    evaluate=evaluate,
    doc=DOC,
    defaults={
        "threshold": 5.0,
        "type_tolerance": 0.5,
        "uncertain_type_tolerance": 1.5,
        "dwarf_scatter_dex": 0.02,
        "giant_scatter_dex": 0.03,
        "supergiant_scatter_dex": 0.05,
        "assumed_teff_fraction": 0.03,
        "floor_dex": 0.01,
    },
)

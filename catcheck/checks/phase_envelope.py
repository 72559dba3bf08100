"""``phase_envelope``: log g, luminosity and radius within what the labelled phase allows."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache

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
)
from catcheck.physics.envelopes import envelope_bounds, envelope_phases, phase_envelope
from catcheck.physics.stellar import LN10
from catcheck.quantities import PHASE_CODES, PHASE_INDEX

#: the envelope bounds of each compared quantity, and its name and unit in messages
_BOUNDS = {"logg": ("logg_min", "logg_max"), "luminosity": ("logl_min", "logl_max"),
           "radius": ("log_r_min", "log_r_max")}
_LABELS = {"logg": ("log g", "dex(cm/s2)"), "luminosity": ("log L", "dex(Lsun)"),
           "radius": ("log R", "dex(Rsun)")}


@cache
def _teff_ranges() -> tuple[np.ndarray, np.ndarray]:
    """log Teff range of each phase code's envelope (NaN for phases without one)."""
    low = np.full(len(PHASE_CODES), np.nan)
    high = np.full(len(PHASE_CODES), np.nan)
    covered = set(envelope_phases()) | {"BSS"}
    for code in PHASE_CODES:
        if code in covered:
            envelope = phase_envelope(code)
            low[PHASE_INDEX[code]] = np.nanmin(envelope.log_teff_low)
            high[PHASE_INDEX[code]] = np.nanmax(envelope.log_teff_high)
    return low, high


@dataclass
class _Assessment:
    """The worst deviation of each row from its phase's envelope, and what it concerns."""

    deviation: np.ndarray  # in sigma; NaN where nothing could be compared
    observed: np.ndarray
    expected: np.ndarray  # the envelope edge passed
    worst: np.ndarray  # index into the compared quantities
    covered: np.ndarray  # the phase has an envelope
    log_teff: np.ndarray  # the log Teff the envelope edge was taken at


def _assess(phase: np.ndarray, log_teff: np.ndarray, s_teff: np.ndarray,
            compared: list[tuple[str, np.ndarray, np.ndarray]], params: Params,
            range_check: bool = True) -> _Assessment:
    """Deviation of rows (any subset of a batch) from their envelopes at ``log_teff``.

    With ``range_check`` a Teff outside the phase's whole range counts too (in sigma of
    the Teff error itself, so it is judged at the catalogued Teff only).

    Most rows lie inside every band: their deviation is 0, against the first compared
    quantity and its lower edge.  Only the others are measured (:func:`_worst_of`).
    """
    bounds = envelope_bounds(phase, log_teff, margin=params["pad_dex"])
    bands = []
    inside = np.full(len(log_teff), bool(compared))
    for quantity, value, sigma in compared:
        low, high = (getattr(bounds, name) for name in _BOUNDS[quantity])
        with np.errstate(invalid="ignore"):  # NaN is never inside
            inside &= value >= low
            inside &= value <= high
        bands.append((value, sigma, low, high))
    rest = np.flatnonzero(~inside)
    if bands:  # inside every band: the first quantity at its lower edge, 0 sigma out
        deviation = np.zeros(len(log_teff))
        observed, expected = bands[0][0].astype(float), bands[0][2].copy()  # filled below
    else:
        deviation, observed, expected = (np.empty(len(log_teff)) for _ in range(3))
    worst = np.zeros(len(log_teff), dtype=np.intp)
    deviation[rest], observed[rest], expected[rest], worst[rest] = _worst_of(
        [tuple(column[rest] for column in band) for band in bands], params,
        (phase[rest], log_teff[rest], s_teff[rest], bounds.outside_range[rest])
        if range_check else None)
    return _Assessment(deviation, observed, expected, worst, bounds.covered,
                       np.asarray(log_teff, dtype=float).copy())


def _worst_of(bands: list[tuple[np.ndarray, ...]], params: Params,
              teff_range: tuple[np.ndarray, ...] | None
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(deviation, observed, expected edge, index) of each row's worst quantity.

    ``bands`` holds (value, sigma, low, high) per compared quantity; ``teff_range`` the
    rows' (phase, log Teff, its sigma, outside the phase's Teff range) when that counts
    too, as the last quantity.  A quantity that cannot be compared (NaN) never is worst.
    """
    deviations, values, limits = [], [], []
    for value, sigma, low, high in bands:
        z = excess_sigma(value, combined_sigma(sigma, floor=params["floor_dex"]), low, high)
        deviations.append(np.where(np.isnan(low), np.nan, z))
        values.append(value)
        limits.append(np.where(value > high, high, low))
    if teff_range is not None:  # Teff outside the phase's whole range, in sigma of log Teff
        phase, log_teff, s_teff, outside_range = teff_range
        range_low, range_high = _teff_ranges()
        known = phase >= 0
        code = np.where(known, phase, 0)
        t_low = np.where(known, range_low[code], np.nan) - params["teff_pad_dex"]
        t_high = np.where(known, range_high[code], np.nan) + params["teff_pad_dex"]
        z_teff = excess_sigma(log_teff, combined_sigma(s_teff,
                                                       floor=params["teff_floor_dex"]),
                              t_low, t_high)
        deviations.append(np.where(outside_range, z_teff, np.nan))
        values.append(log_teff)
        limits.append(np.where(log_teff > t_high, t_high, t_low))

    stacked = np.vstack(deviations)
    usable = ~np.isnan(stacked)
    worst = np.argmax(np.where(usable, stacked, -np.inf), axis=0)
    pick = np.arange(stacked.shape[1])
    deviation = np.where(usable.any(axis=0), stacked[worst, pick], np.nan)
    return deviation, np.vstack(values)[worst, pick], np.vstack(limits)[worst, pick], worst


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose log g, log L or log R lies outside their phase's envelope.

    Near a steep edge of an envelope (the cool base of the giant branch) the allowed log g
    changes fast with Teff, so a row that fails at its catalogued Teff is judged again at
    Teff -+ teff_sigmas x its Teff error, and the most favourable result counts.
    """
    log_teff = batch.log10("teff")
    s_teff = batch.log_sigma("teff", params["assumed_teff_fraction"] / LN10)
    compared = []
    for quantity in _BOUNDS:
        if quantity == "logg" and "logg" in batch.values:
            compared.append((quantity, batch.values["logg"],
                             batch.error_or("logg", params["assumed_logg_dex"])))
        elif quantity in batch.values:
            compared.append((quantity, batch.log10(quantity),
                             batch.log_sigma(quantity, params["assumed_log_dex"])))
    result = _assess(batch.phase, log_teff, s_teff, compared, params)
    with np.errstate(invalid="ignore"):
        suspects = np.flatnonzero(result.deviation > params["threshold"])
    for sign in (-1.0, 1.0) if compared else ():  # nothing to re-judge without log g, L, R
        shifted_teff = log_teff[suspects] + sign * params["teff_sigmas"] * s_teff[suspects]
        retry = _assess(batch.phase[suspects], shifted_teff, s_teff[suspects],
                        [(q, v[suspects], e[suspects]) for q, v, e in compared], params,
                        range_check=False)
        with np.errstate(invalid="ignore"):
            better = (retry.deviation < result.deviation[suspects]) & (
                result.worst[suspects] < len(compared))  # a Teff-range failure stands
        rows = suspects[better]
        for field in ("deviation", "observed", "expected", "worst", "log_teff"):
            getattr(result, field)[rows] = getattr(retry, field)[better]

    applies = result.covered & ~np.isnan(result.deviation)
    deviation = np.where(applies, result.deviation, np.nan)
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])
        beyond = deviation > params["error_threshold"]
    labels = [_LABELS[q] for q, _, _ in compared]

    def describe(rows: np.ndarray) -> list[str]:
        phases = [PHASE_CODES[c] for c in batch.phase[rows].tolist()]
        which = result.worst[rows].tolist()
        with np.errstate(over="ignore"):  # a Teff of 1e308 K, shifted by its error
            teff_at = np.power(10.0, result.log_teff[rows])
        return [
            _message(phase, labels[k] if k < len(labels) else None, t, at, o, e, d, params)
            for phase, k, (t, at, o, e, d) in zip(
                phases, which, at_rows(np.arange(len(rows)), batch.values["teff"][rows],
                                       teff_at, result.observed[rows],
                                       result.expected[rows], deviation[rows]),
                strict=True)
        ]

    return Outcome(failed, describe, result.observed, result.expected, deviation, applies,
                   beyond)


def _message(phase: str, label: tuple[str, str] | None, teff: float, teff_at: float,
             observed: float, edge: float, deviation: float, params: Params) -> str:
    """One flag's message: which quantity lies outside which bound of the phase's envelope.

    ``label`` is the quantity's name and unit, None when Teff itself is outside the
    phase's Teff range (``observed`` and ``edge`` are then log Teff); ``teff_at`` is the
    Teff the bound was taken at (the catalogued one, or the most favourable within
    teff_sigmas of it).
    """
    side = "above" if observed > edge else "below"
    if label is None:
        extreme = "hottest" if observed > edge else "coolest"
        return (f"{phase} star: Teff = {fmt(teff)} K is {side} the {extreme} Teff of the "
                f"{phase} envelope, {fmt(10.0 ** edge)} K ({params['teff_pad_dex']:g} dex "
                f"margin included): {deviation:.1f} sigma")
    name, unit = label
    bound = "upper" if observed > edge else "lower"
    if math.isclose(teff_at, teff, rel_tol=1e-9):
        where = "there"
    else:
        where = (f"even at Teff = {fmt(teff_at)} K, {params['teff_sigmas']:g} sigma "
                 f"{'cooler' if teff_at < teff else 'hotter'}")
    return (f"{phase} star at Teff = {fmt(teff)} K: {name} = {observed:.2f} {unit} is {side} "
            f"the {phase} envelope: its {bound} bound is {edge:.2f} {unit} {where} "
            f"({params['pad_dex']:g} dex margin included): {deviation:.1f} sigma")


CHECK = Check(
    name="phase_envelope",
    needs=fixed_needs("phase", "teff"),
    evaluate=evaluate,
    escalates=True,
    doc=Documentation(
        what="Flags a star whose log g, luminosity or radius (whichever the catalogue "
        "gives) lies outside what its labelled phase allows at its Teff, or whose Teff is "
        "outside the phase's range altogether: a 'red giant' with log g 4.5, a cool "
        "'main-sequence' star with log g 3.0, a white dwarf with a giant's radius.",
        why="Each phase occupies its own region of the Kiel (Teff, log g) and HR (Teff, "
        "log L) diagrams.  A star outside its phase's region carries the wrong phase "
        "label, or a wrong log g, luminosity or radius.",
        formula="envelope: per phase and 0.01 dex bin of log Teff, the extremes of log g "
        "and log L of PARSEC v1.2S model points of that phase over [M/H] -2..+0.5 and all "
        "ages up to the age of the Universe (this bin and its neighbours); log R bounds by "
        "Stefan-Boltzmann; boxes from memory for WD, AGB, RSG, BSG and hot HB stars\n"
        "a row outside at its Teff is judged again at Teff -+ teff_sigmas x its Teff error "
        "and the most favourable result counts (steep envelope edges)\n"
        "deviation = distance outside [min - pad_dex, max + pad_dex] in sigma of the "
        "star's own error (the worst of log g, log L, log R), or of log Teff outside the "
        "phase's Teff range widened by teff_pad_dex\n"
        "warning beyond threshold sigma, error beyond error_threshold sigma",
        caveats="Unresolved binaries sit up to 0.3 dex above the single-star main "
        "sequence; stars more metal-poor than [M/H] = -2 are hotter and brighter than the "
        "models; rapid rotators, stripped stars and merger products fall outside "
        "single-star envelopes; the boxes for white dwarfs, AGB stars and supergiants are "
        "from memory, not models.  Post-AGB and Wolf-Rayet stars are not checked.",
        example="A star labelled RGB at 4800 K with log g 4.50 +- 0.1: the RGB envelope "
        "near 4800 K reaches log g ~3.6, so with a 0.1 dex margin it is 0.8 dex above, "
        "8 sigma: an error.  A cool dwarf (5000 K) labelled MS with log g 3.0 lies ~1.3 "
        "dex below the main sequence.",
        references=("Bressan et al. (2012), MNRAS 427, 127: PARSEC v1.2S isochrones "
                    "(envelopes derived by scripts/derive_envelopes.py)",),
    ),
    defaults={"threshold": 3.0, "error_threshold": 5.0, "pad_dex": 0.1, "floor_dex": 0.05,
              "teff_pad_dex": 0.02, "teff_floor_dex": 0.01, "teff_sigmas": 2.0,
              "assumed_logg_dex": 0.15, "assumed_log_dex": 0.05,
              "assumed_teff_fraction": 0.02},
)

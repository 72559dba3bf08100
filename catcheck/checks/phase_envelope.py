"""``phase_envelope``: log g, luminosity and radius within what the labelled phase allows."""

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
)
from catcheck.physics.envelopes import envelope_bounds, envelope_phases, phase_envelope
from catcheck.physics.stellar import LN10
from catcheck.quantities import PHASE_CODES, PHASE_INDEX

#: what each compared quantity is called in messages, with its bound names
_QUANTITIES = (
    ("log g", "logg", "logg_min", "logg_max"),
    ("log L", "luminosity", "logl_min", "logl_max"),
    ("log R", "radius", "log_r_min", "log_r_max"),
)


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


def evaluate(batch: StarBatch, params: Params) -> Outcome:
    """Flag rows whose log g, log L or log R lies outside their phase's envelope."""
    log_teff = batch.log10("teff")
    bounds = envelope_bounds(batch.phase, log_teff)
    pad = params["pad_dex"]
    s_teff = batch.log_sigma("teff", params["assumed_teff_fraction"] / LN10)
    deviations, values, limits, names = [], [], [], []
    for label, quantity, low_name, high_name in _QUANTITIES:
        if quantity not in batch.values:
            continue
        value = batch.values[quantity] if quantity == "logg" else batch.log10(quantity)
        s_value = (batch.error_or("logg", params["assumed_logg_dex"]) if quantity == "logg"
                   else batch.log_sigma(quantity, params["assumed_log_dex"]))
        low = getattr(bounds, low_name) - pad
        high = getattr(bounds, high_name) + pad
        z = excess_sigma(value, combined_sigma(s_value, floor=params["floor_dex"]), low, high)
        deviations.append(np.where(np.isnan(low), np.nan, z))
        values.append(value)
        limits.append(np.where(value > high, high, low))
        names.append(label)
    # Teff outside the phase's whole range, in sigma of log Teff
    range_low, range_high = _teff_ranges()
    known = batch.phase >= 0
    code = np.where(known, batch.phase, 0)
    teff_pad = params["teff_pad_dex"]
    t_low = np.where(known, range_low[code], np.nan) - teff_pad
    t_high = np.where(known, range_high[code], np.nan) + teff_pad
    z_teff = excess_sigma(log_teff, combined_sigma(s_teff, floor=params["teff_floor_dex"]),
                          t_low, t_high)
    deviations.append(np.where(bounds.outside_range, z_teff, np.nan))
    values.append(log_teff)
    limits.append(np.where(log_teff > t_high, t_high, t_low))
    names.append("log Teff")

    stacked = np.vstack(deviations)
    usable = ~np.isnan(stacked)
    applies = bounds.covered & usable.any(axis=0)
    worst = np.argmax(np.where(usable, stacked, -np.inf), axis=0)
    pick = np.arange(batch.size)
    deviation = np.where(applies, stacked[worst, pick], np.nan)
    observed = np.vstack(values)[worst, pick]
    expected = np.vstack(limits)[worst, pick]
    with np.errstate(invalid="ignore"):
        failed = applies & (deviation > params["threshold"])
        beyond = deviation > params["error_threshold"]

    def describe(rows: np.ndarray) -> list[str]:
        phases = [PHASE_CODES[c] for c in batch.phase[rows].tolist()]
        which = worst[rows].tolist()
        return [
            f"{phase} star at Teff {10 ** t:.0f} K has {names[k]} = {o:.2f}, "
            f"{'above' if o > e else 'below'} the {phase} envelope's {e:.2f} at that Teff "
            f"(with {pad:g} dex margin): {d:.1f} sigma"
            for phase, k, (t, o, e, d) in zip(
                phases, which, at_rows(rows, log_teff, observed, expected, deviation),
                strict=True)
        ]

    return Outcome(failed, describe, observed, expected, deviation, applies, beyond)


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
              "teff_pad_dex": 0.02, "teff_floor_dex": 0.01,
              "assumed_logg_dex": 0.15, "assumed_log_dex": 0.05,
              "assumed_teff_fraction": 0.02},
)

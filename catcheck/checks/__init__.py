"""The built-in checks, by the name a rule pack uses in ``check = "..."``."""

from __future__ import annotations

from catcheck.checks import (
    cluster_members,
    cluster_turnoff,
    eddington,
    evolution,
    mass_limits,
    ms_mass_luminosity,
    parallax_distance,
    phase_envelope,
    physical_range,
    spectral_type_teff,
    stefan_boltzmann,
    surface_gravity,
    unit_blunders,
)
from catcheck.checks.base import Check

CHECKS: dict[str, Check] = {
    check.name: check
    for check in (
        physical_range.CHECK,
        stefan_boltzmann.CHECK,
        surface_gravity.CHECK,
        ms_mass_luminosity.CHECK,
        eddington.CHECK,
        mass_limits.HYDROGEN_BURNING,
        mass_limits.CHANDRASEKHAR,
        parallax_distance.CHECK,
        spectral_type_teff.CHECK,
        cluster_members.PARALLAX_CHECK,
        cluster_members.METALLICITY_CHECK,
        cluster_members.AGE_CHECK,
        evolution.MS_LIFETIME,
        evolution.EVOLVED_TOO_YOUNG,
        evolution.PMS_TOO_OLD,
        evolution.WHITE_DWARF_TOO_YOUNG,
        evolution.BLUE_STRAGGLER,
        phase_envelope.CHECK,
        cluster_turnoff.CHECK,
        *unit_blunders.CHECKS,
    )
}

"""Closed-form first-order expressions designers reason with; the solver is the authority, these explain."""

from __future__ import annotations

import numpy as np


def gbw_dominant_pole(gm_in, cc):
    """Unity-gain frequency of a Miller-compensated amplifier with a dominant pole: gm1 / (2 pi Cc), Hz."""
    return np.asarray(gm_in) / (2 * np.pi * np.asarray(cc))


def closed_loop_gain_error(a0, beta):
    """Relative shortfall of a non-inverting loop's gain from 1/beta for open-loop gain a0: 1/(1 + a0 beta)."""
    return 1.0 / (1.0 + np.asarray(a0) * beta)


def two_pole_phase_margin(ratio):
    """Phase margin (deg) of a two-pole loop whose second pole sits at `ratio` times the unity-gain frequency
    (dominant pole far below): 90 - atan(1/ratio)."""
    return 90.0 - np.degrees(np.arctan(1.0 / np.asarray(ratio)))


def pair_thermal_noise(temperature: float, gm_in, gm_load, gamma: float = 2.0 / 3.0):
    """Input-referred white-noise density (V/sqrt(Hz)) of a mirror-loaded pair: both input devices and both
    load devices, 4kT gamma / gm each, the load's referred through (gm_load/gm_in)^2."""
    kt4 = 4 * 1.380649e-23 * temperature * gamma
    return np.sqrt(2 * kt4 / gm_in * (1 + gm_load / gm_in))

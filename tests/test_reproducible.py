"""Same study, same seed: the same front, bit for bit; the manifest records where it came from."""

import json
import shutil

from ampfront.optimize.run import run_study

from .conftest import demo_text


def test_same_seed_same_front(tmp_path):
    study = tmp_path / "small.toml"
    text = demo_text(40, 12)
    study.write_text(text)
    run_study(study, tmp_path / "a")
    run_study(study, tmp_path / "b")
    assert (tmp_path / "a" / "front.csv").read_bytes() == (tmp_path / "b" / "front.csv").read_bytes()
    run_study(study, tmp_path / "c", seed=12345)
    assert (tmp_path / "a" / "front.csv").read_bytes() != (tmp_path / "c" / "front.csv").read_bytes()
    shutil.rmtree(tmp_path / "c")


def test_outputs_and_manifest(demo_run):
    # closest.csv: the demo's five-transistor OTA meets nothing beside feasible fronts.
    assert {p.name for p in demo_run.iterdir()} == {"report.html", "front.csv", "closest.csv", "manifest.json", "netlists"}
    manifest = json.loads((demo_run / "manifest.json").read_text())
    for key in ("versions", "seed", "study", "technology", "evaluations", "wall_time_s"):
        assert key in manifest
    assert len(manifest["study"]["sha256"]) == 64 and len(manifest["technology"]["sha256"]) == 64
    assert manifest["technology"]["name"] == "sky130-tt"  # the default technology
    assert manifest["evaluations"] >= 100
    html = (demo_run / "report.html").read_text()
    assert "Pre-layout estimates" in html and "<script" in html
    assert "<script src=\"http" not in html  # plotly.js is embedded: the page opens with no network


def test_front_csv_columns(demo_run):
    import pandas as pd

    front = pd.read_csv(demo_run / "front.csv")
    for column in ("topology", "design", "gain_db", "gbw_hz", "phase_margin_deg", "power_w", "area_m2",
                   "slew_v_per_s", "margin_min_gain", "margin_saturation_margin", "x_i_tail",
                   "w_input_pair_a_um", "l_output_driver_um"):
        assert column in front.columns
    margins = front[[c for c in front.columns if c.startswith("margin_")]]
    assert (margins.to_numpy() >= -1e-9).all()  # every front design meets the spec
    assert len(front) >= 5


def test_parallel_search_gives_the_serial_front(tmp_path):
    """Topologies searched in separate processes give the very same front as one after the other."""
    study = tmp_path / "two.toml"
    # A short search of the demo; its noise bound is dropped so six generations still find designs.
    text = demo_text(24, 6).replace('max_noise_rms = "40 uV"', "")
    study.write_text(text)
    run_study(study, tmp_path / "serial", workers=1)
    run_study(study, tmp_path / "parallel", workers=2)
    assert (tmp_path / "serial" / "front.csv").read_bytes() == (tmp_path / "parallel" / "front.csv").read_bytes()

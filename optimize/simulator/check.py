"""Re-simulate chosen front designs in ngspice and compare with what the model predicted."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from ampfront.topologies.errors import InputError
from ampfront.topologies.schema import read_toml
from ampfront.optimize.simulator.ngspice import simulate, simulate_swing

# Agreement expected between model and simulator. Square law against ngspice level 1 is the same equations,
# so only numerics separate them; tables against BSIM4 add interpolation and the two-terminal capacitance
# approximation of a charge-based model.
BOUNDS = {
    "square_law": {"gain_db": ("abs", 0.5), "gbw_hz": ("rel", 0.05), "phase_margin_deg": ("abs", 3.0),
                   "supply_current_a": ("rel", 0.02), "noise_1hz_v_rthz": ("rel", 0.05),
                   "noise_100hz_v_rthz": ("rel", 0.05),
                   "cmrr_db": ("abs", 2.0), "psrr_db": ("abs", 2.0)},
    "gm_id_tables": {"gain_db": ("abs", 2.0), "gbw_hz": ("rel", 0.10), "phase_margin_deg": ("abs", 5.0),
                     "supply_current_a": ("rel", 0.03), "cmrr_db": ("abs", 6.0), "psrr_db": ("abs", 6.0),
                     "noise_1hz_v_rthz": ("rel", 0.15), "noise_100hz_v_rthz": ("rel", 0.15)},
}
# Rejection of an ideal, unmismatched circuit beyond this is set by residual bias asymmetries, not by the
# circuit; real parts are limited by mismatch long before. Both sides are compared clipped here.
REJECTION_CEILING_DB = 100.0
# Swing from the DC sweep into the load (optimize.spice.simulate_swing): the model's swing keeps every
# device of the signal path saturated, so it may end this much short of where the swept gain collapses,
# and may claim at most SWING_SLACK_V more than the sweep shows.
SWING_SLACK_V = 0.05
SWING_SHORTFALL_V = 0.3


def technology_kind(folder: Path) -> str:
    manifest = folder / "manifest.json"
    if not manifest.is_file():
        raise InputError(str(folder), "manifest.json", "a folder written by 'ampfront run'")
    tech_file = Path(json.loads(manifest.read_text())["technology"]["file"])
    return read_toml(tech_file).get("kind", "square_law")


def study_cm(folder: Path) -> float:
    """The common-mode level the testbenches were written for (manifest `conditions`)."""
    manifest = json.loads((folder / "manifest.json").read_text())
    try:
        return float(manifest["conditions"]["v_cm_v"])
    except (KeyError, TypeError, ValueError):
        raise InputError(str(folder), "manifest.json conditions.v_cm_v", "a folder written by this version of "
                         "'ampfront run'") from None


def spread_picks(front: pd.DataFrame, count: int) -> list[int]:
    """Designs spread along the front: evenly spaced rows of the table (it is sorted by an objective)."""
    count = max(1, min(count, len(front)))
    return sorted({round(i * (len(front) - 1) / max(count - 1, 1)) for i in range(count)})


def check_folder(folder: Path, count: int) -> pd.DataFrame:
    table = folder / "front.csv"
    if not table.is_file():
        raise InputError(str(folder), "front.csv", "a folder written by 'ampfront run'")
    front = pd.read_csv(table)
    bounds = BOUNDS[technology_kind(folder)]
    v_cm = study_cm(folder)
    rows = []
    for i in spread_picks(front, count):
        row = front.iloc[i].copy()
        # The flicker-dominated spot the testbench measures: white floor plus flicker at 1 Hz.
        row["noise_1hz_v_rthz"] = (row["noise_thermal_v_rthz"] ** 2 + row["noise_flicker_1hz_v_rthz"] ** 2) ** 0.5
        got = simulate(folder / "netlists" / f"{row['design']}_tb.sp")
        entry = {"design": row["design"]}
        ok = True
        for column, (kind, bound) in bounds.items():
            model, spice = float(row[column]), got[column]
            if column in ("cmrr_db", "psrr_db"):
                model, spice = min(model, REJECTION_CEILING_DB), min(spice, REJECTION_CEILING_DB)
            error = abs(spice - model) if kind == "abs" else abs(spice - model) / abs(model)
            entry[f"{column}_model"], entry[f"{column}_spice"] = model, spice
            ok &= error <= bound
        swing = folder / "netlists" / f"{row['design']}_swing.sp"
        if swing.is_file():
            swept = simulate_swing(swing, f"{row['design']}_swing.dat", v_cm)
            for column, sign in (("out_low_v", 1.0), ("out_high_v", -1.0)):
                model = float(row[column])
                entry[f"{column}_model"], entry[f"{column}_spice"] = model, swept[column]
                # Positive when the model is the more conservative of the two.
                short = sign * (model - swept[column])
                ok &= -SWING_SLACK_V <= short <= SWING_SHORTFALL_V
        entry["within_bounds"] = ok
        rows.append(entry)
    return pd.DataFrame(rows)

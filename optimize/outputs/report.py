"""The interactive HTML report: one self-contained page (plotly.js embedded, opens with no network)."""

from __future__ import annotations

import html

import pandas as pd
import plotly.graph_objects as go

from ampfront.optimize.spec.study import OBJECTIVES, Study
from ampfront.topologies.units import eng

CAUTION = ("Pre-layout estimates from analytic device models. Confirm every design with the foundry's models, "
           "sign-off simulation across corners and the team's design review before committing to it.")

# How each metric is shown: label, unit for eng(), scale applied first.
SHOWN = {
    "gain_db": ("DC gain", "dB", None), "gbw_hz": ("GBW", "Hz", 1.0),
    "phase_margin_deg": ("Phase margin", "°", None), "gain_margin_db": ("Gain margin", "dB", None),
    "power_w": ("Power", "W", 1.0), "area_um2": ("Area", "µm²", None),
    "slew_v_per_us": ("Slew rate", "V/µs", None), "swing_v": ("Output swing", "V", None),
    "noise_thermal_v_rthz": ("White noise", "V/√Hz", 1.0), "noise_corner_hz": ("1/f corner", "Hz", 1.0),
    "noise_rms_v": ("Noise in band", "Vrms", 1.0), "offset_sigma_v": ("Offset (1σ)", "V", 1.0),
    "peak_out_a": ("Peak output current", "A", 1.0), "output_resistance_ohm": ("Output resistance", "Ω", 1.0),
    "cmrr_db": ("CMRR", "dB", None), "psrr_db": ("PSRR", "dB", None),
}
_PALETTE = ["#0b6e4f", "#c84c09", "#3a5a9b", "#8a2a6b", "#b59a00", "#2a8a8a", "#6b4f2a", "#555555"]


def _fmt(key: str, value: float) -> str:
    label, unit, scale = SHOWN[key]
    return eng(value * scale, unit) if scale else f"{value:.3g} {unit}"


def _axis(name: str) -> tuple[str, str, bool]:
    metric, _, log = OBJECTIVES[name]
    label, unit, _ = SHOWN[metric]
    return metric, f"{label} ({unit.replace('°', 'deg')})", log


def _hover(df: pd.DataFrame) -> list[str]:
    lines = []
    for _, row in df.iterrows():
        parts = [f"<b>{row['design']}</b> ({row['topology']})"]
        parts += [f"{SHOWN[k][0]}: {_fmt(k, row[k])}" for k in SHOWN if k in row]
        lines.append("<br>".join(parts))
    return lines


def front_figure(df: pd.DataFrame, study: Study) -> go.Figure:
    names = list(study.objectives)
    fig = go.Figure()
    for i, (topology, group) in enumerate(df.groupby("topology", sort=False)):
        color = _PALETTE[i % len(_PALETTE)]
        hover = _hover(group)
        if len(names) == 2:
            (mx, lx, logx), (my, ly, logy) = _axis(names[0]), _axis(names[1])
            fig.add_trace(go.Scatter(x=group[mx], y=group[my], mode="markers", name=topology, text=hover,
                                     hoverinfo="text", marker=dict(color=color, size=9, line=dict(width=0.5))))
            fig.update_xaxes(title=lx, type="log" if logx else "linear")
            fig.update_yaxes(title=ly, type="log" if logy else "linear")
        else:
            dims = [dict(label=_axis(n)[1], values=group[_axis(n)[0]]) for n in names]
            fig.add_trace(go.Splom(dimensions=dims, name=topology, text=hover, hoverinfo="text",
                                   diagonal_visible=False, showupperhalf=False,
                                   marker=dict(color=color, size=6, line=dict(width=0.3, color="white"))))
    if len(names) > 2:
        # Splom axes are numbered by dimension; quantities spanning decades read best on log axes.
        for k, name in enumerate(names, start=1):
            if _axis(name)[2]:
                suffix = "" if k == 1 else str(k)
                fig.layout[f"xaxis{suffix}"] = dict(type="log")
                fig.layout[f"yaxis{suffix}"] = dict(type="log")
    fig.update_layout(height=560 if len(names) == 2 else 220 * len(names), template="plotly_white",
                      margin=dict(l=70, r=20, t=30, b=60), legend_title_text="Topology", hovermode="closest")
    return fig


def spec_rows(study: Study) -> list[tuple[str, str]]:
    units = {"supply": "V", "load_capacitance": "F", "load_resistance": "Ω", "min_gbw": "Hz",
             "max_power": "W", "saturation_margin": "V", "min_output_swing": "V"}
    rows = []
    for key, value in study.spec.items():
        if key in units:
            text = eng(value, units[key])
        elif key == "min_slew_rate":
            text = f"{value * 1e-6:.3g} V/µs"
        elif key == "max_area":
            text = f"{value * 1e12:.4g} µm²"
        else:
            text = f"{value:.4g} {'dB' if 'gain' in key else 'deg'}"
        rows.append((key.replace("_", " "), text))
    low, high = study.cm_range
    rows.append(("input common mode", eng(low, "V") if low == high else f"{eng(low, 'V')} to {eng(high, 'V')}"))
    return rows


def render(df: pd.DataFrame, study: Study, tech_name: str, summary: dict) -> str:
    fig = front_figure(df, study).to_html(full_html=False, include_plotlyjs=True,
                                          config={"displaylogo": False, "responsive": True})
    spec = "".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>" for k, v in spec_rows(study))
    shown = ["topology", "design"] + [k for k in SHOWN if k in df]
    head = "".join(f"<th>{html.escape(SHOWN[k][0] if k in SHOWN else k)}</th>" for k in shown)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_fmt(k, row[k]) if k in SHOWN else str(row[k]))}</td>" for k in shown)
        + "</tr>" for _, row in df.iterrows())
    facts = "".join(f"<li>{html.escape(k)}: {html.escape(str(v))}</li>" for k, v in summary.items())
    objectives = ", ".join(study.objectives)
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{html.escape(study.title)} · ampfront</title>
<style>
body {{ font-family: system-ui, sans-serif; margin: 0 auto; max-width: 1200px; padding: 1rem 2rem; color: #222; }}
h1 {{ font-size: 1.5rem; margin-bottom: .2rem; }} .sub {{ color: #555; margin-top: 0; }}
.caution {{ border-left: 4px solid #c84c09; background: #fff6ef; padding: .6rem 1rem; }}
.cols {{ display: flex; gap: 2rem; flex-wrap: wrap; }} table {{ border-collapse: collapse; font-size: .85rem; }}
th, td {{ padding: .2rem .6rem; border-bottom: 1px solid #e4e4e4; text-align: left; }}
.designs {{ max-height: 420px; overflow: auto; }}
</style></head><body>
<h1>{html.escape(study.title)}</h1>
<p class="sub">Trade-off map on <b>{html.escape(tech_name)}</b> · objectives: {html.escape(objectives)}</p>
<p class="caution" id="caution">{html.escape(CAUTION)}</p>
<div class="cols"><section><h2>Spec</h2><table id="spec">{spec}</table></section>
<section><h2>Search</h2><ul>{facts}</ul></section></div>
<h2>Pareto front</h2>
<p>Every point is a sized design meeting the whole spec; hover for its figures. Its netlist is in
<code>netlists/&lt;design&gt;.sp</code> and its full row in <code>front.csv</code>.</p>
{fig}
<h2>Front designs</h2><div class="designs"><table id="designs"><thead><tr>{head}</tr></thead>
<tbody>{body}</tbody></table></div>
</body></html>
"""

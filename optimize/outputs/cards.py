"""Design cards: a few designs per topology (its knee and its extremes) shown whole — schematic, devices
with their region of operation, predicted figures against the spec, the open-loop Bode plot and, once
`ampfront check` has run, the model beside the simulator."""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

import pandas as pd

from ampfront.optimize.outputs import bode, knee
from ampfront.optimize.outputs.schematic import region, schematic_svg
from ampfront.topologies.base import Build, Conditions
from ampfront.topologies.catalog import M, METRICS, OBJECTIVES, RULES, metric
from ampfront.topologies.units import eng


@dataclass(frozen=True)
class Pick:
    topology: str
    row: int          # position among the topology's rows of the front table (= its Build's index)
    design: str
    why: str


def picks(table: pd.DataFrame, name: str, objectives, axes: tuple[str, str] | None) -> list[Pick]:
    """The knee, then the best design on each of the verdict's two objectives, then on the others: one card
    per design, however many of these roles it plays (at most one more than the objectives)."""
    rows = table[table["topology"] == name].reset_index(drop=True)
    if rows.empty:
        return []
    order = list(axes or ()) + [o for o in objectives if o not in (axes or ())]
    ends = knee.extremes(rows, objectives)
    chosen = [(knee.knee(rows, objectives), "knee")]
    for o in order:
        m = METRICS[OBJECTIVES[o].metric]
        word = "lowest" if OBJECTIVES[o].sense == "min" else "highest"
        chosen.append((ends[o], f"{word} {m.label if m.label[:2].isupper() else m.label.lower()}"))
    out, seen = [], {}
    for position, why in chosen:
        if position in seen:
            seen[position].append(why)
            continue
        seen[position] = [why]
        out.append(position)
    return [Pick(name, p, str(rows.loc[p, "design"]), " and ".join(seen[p])) for p in out]


def _figures(row: pd.Series, constraints) -> str:
    limits: dict[str, list[str]] = {}
    # The always-on rules (KCL, stability counts) hold for every design shown; the card lists the spec.
    constraints = [c for c in constraints if c.name not in RULES]
    for c in constraints:
        if c.metric in METRICS:
            limits.setdefault(c.metric, []).append(("≥ " if c.sense == "min" else "≤ ") + metric(c.metric).format(c.bound))
    shown = [k for k, m in METRICS.items() if (m.in_report or k in limits or k == M.settling_s) and k in row]
    lines = []
    for k in shown:
        value = float(row[k]) if pd.notna(row[k]) else float("nan")
        spec = ", ".join(limits.get(k, ()))
        margin = [float(row[f"margin_{c.name}"]) for c in constraints
                  if c.metric == k and f"margin_{c.name}" in row and pd.notna(row[f"margin_{c.name}"])]
        state = "" if not margin else ("meets" if min(margin) >= 0 else "misses")
        lines.append(f"<tr class='{state}'><th>{escape(METRICS[k].label)}</th><td>{escape(METRICS[k].format(value))}"
                     f"</td><td>{escape(spec)}</td><td>{state}</td></tr>")
    return ("<table class='figs'><thead><tr><th>Figure</th><th>Predicted</th><th>Spec</th><th></th></tr></thead>"
            f"<tbody>{''.join(lines)}</tbody></table>")


def _devices(build: Build, i: int) -> str:
    head = ("<tr><th>Role</th><th>Type</th><th>W</th><th>L</th><th>ID</th><th>VGS</th><th>VDS</th><th>Vdsat</th>"
            "<th>VDS − Vdsat</th><th>gm</th><th>gm/ID</th><th>gm/gds</th><th>Region</th></tr>")
    body = []
    for d in build.devices:
        op = d.op
        current, gm, gds = float(op.id[i]), float(op.gm[i]), float(op.gds[i])
        vds, vdsat = float(d.vds[i]), float(op.vdsat[i])
        gm_id = gm / current if current else float("nan")
        cells = [d.role, "nMOS" if d.polarity == "n" else "pMOS", eng(float(d.w[i]), "m"), eng(float(d.l[i]), "m"),
                 eng(current, "A"), eng(float(d.vgs[i]), "V"), eng(vds, "V"), eng(vdsat, "V"), eng(vds - vdsat, "V"),
                 eng(gm, "S"), f"{gm_id:.3g} S/A", f"{gm / gds:.3g}" if gds else "n/a", region(vds, vdsat, gm_id)]
        body.append("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in cells) + "</tr>")
    for e in build.elements:
        unit = {"R": "Ω", "C": "F", "I": "A"}[e.kind]
        kind = {"R": "resistor", "C": "capacitor", "I": "bias current"}[e.kind]
        body.append(f"<tr><td>{escape(e.role)}</td><td>{kind}</td><td colspan='11'>"
                    f"{escape(eng(float(e.value[i]), unit))} between {escape(e.a)} and {escape(e.b)}</td></tr>")
    return f"<table class='devices'><thead>{head}</thead><tbody>{''.join(body)}</tbody></table>"


def _checked(check: pd.DataFrame | None, design: str) -> str:
    if check is None:
        return ("<p class='unchecked'>Not simulated yet: <code>ampfront check DIR</code> runs ngspice on front "
                "designs, and <code>ampfront report DIR</code> then puts its figures here.</p>")
    mine = check[check["design"] == design]
    if mine.empty:
        return "<p class='unchecked'>ampfront check did not simulate this design.</p>"
    rows = []
    for _, r in mine.iterrows():
        known = r["metric"] in METRICS
        fmt = METRICS[r["metric"]].format if known else (lambda v: f"{v:.4g}")
        label = METRICS[r["metric"]].label if known else r["metric"]
        cells = [label, r["corner"], fmt(r["model"]) if pd.notna(r["model"]) else "",
                 fmt(r["simulated"]) if pd.notna(r["simulated"]) else "",
                 f"{r['error']:.3g}" if pd.notna(r["error"]) else "", f"{r['bound']:.3g}" if pd.notna(r["bound"]) else "",
                 r["status"]]
        state = "misses" if r["status"] and r["status"].lower() not in ("ok", "agrees", "pass", "within") else ""
        rows.append(f"<tr class='{state}'>" + "".join(f"<td>{escape(str(c))}</td>" for c in cells) + "</tr>")
    return ("<table class='check'><thead><tr><th>Figure</th><th>Corner</th><th>Model</th><th>ngspice</th>"
            "<th>Error</th><th>Bound</th><th>Status</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def card(pick: Pick, title: str, rows: pd.DataFrame, build: Build | None, cond: Conditions, constraints,
         check: pd.DataFrame | None, figure_html) -> str:
    """One card; `figure_html(fig, name)` embeds a plotly figure (plotly.js is on the page once)."""
    row = rows.iloc[pick.row]
    parts = [f"<article class='card' id='card-{escape(pick.design)}'><h3>{escape(title)} · "
             f"<code>{escape(pick.design)}</code> <span class='why'>{escape(pick.why)}</span></h3>"]
    if build is not None:
        parts.append(f"<div class='schem'>{schematic_svg(build, pick.row, f'{title} {pick.design}', cond.c_load)}</div>")
    parts.append(f"<div class='cardgrid'><section><h4>Predicted figures</h4>{_figures(row, constraints)}</section>")
    if build is not None:
        gbw = float(row[M.gbw_hz]) if M.gbw_hz in row else float("nan")
        pm = float(row[M.phase_margin_deg]) if M.phase_margin_deg in row else float("nan")
        freqs = bode.grid(gbw)
        magnitude, phase = bode.responses(build, cond, [pick.row], freqs)
        fig = bode.bode_figure(freqs, magnitude[0], phase[0], gbw, pm, pick.design)
        parts.append(f"<section><h4>Open loop (small-signal solver)</h4>{figure_html(fig, f'bode-{pick.design}')}"
                     "</section>")
    parts.append("</div>")
    if build is not None:
        parts.append(f"<h4>Devices</h4><div class='scroll'>{_devices(build, pick.row)}</div>")
    parts.append(f"<h4>Model against ngspice</h4>{_checked(check, pick.design)}</article>")
    return "".join(parts)

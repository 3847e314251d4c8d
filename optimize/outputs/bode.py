"""Open-loop Bode plots from the same small-signal solver the search used (no second model)."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

from ampfront.optimize.outputs.axes import axis
from ampfront.topologies.base import Build, Conditions
from ampfront.topologies.catalog import M, METRICS
from ampfront.topologies.evaluate import small_signal

POINTS = 160


def grid(gbw_max: float) -> np.ndarray:
    top = gbw_max * 100 if np.isfinite(gbw_max) and gbw_max > 0 else 1e9
    return np.geomspace(1.0, max(top, 1e3), POINTS)


def responses(build: Build, cond: Conditions, rows, freqs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Magnitude (dB) and phase (degrees, unwrapped, starting within ±180°) of designs `rows`."""
    with np.errstate(all="ignore"):
        rows = np.asarray(rows, int)
        full = small_signal(build, cond)
        bad = np.asarray(getattr(full, "quarantined", np.zeros(full.designs, bool)))[rows]
        circuit = full.subset(rows)
        a = circuit.response("out", freqs)
        magnitude = 20 * np.log10(np.maximum(np.abs(a), 1e-30))
        phase = np.degrees(np.unwrap(np.angle(a), axis=-1))
    # One turn is the same phase: start each curve inside (-180°, 180°] as a testbench would print it.
    phase -= 360 * np.round(phase[:, :1] / 360)
    magnitude[bad], phase[bad] = np.nan, np.nan
    return magnitude, phase


def bode_figure(freqs: np.ndarray, magnitude: np.ndarray, phase: np.ndarray, gbw: float, pm: float,
                name: str) -> go.Figure:
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.06)
    fig.add_trace(go.Scatter(x=freqs, y=magnitude, mode="lines", name="|A|", line=dict(color="#0072B2", width=2),
                             hovertemplate="%{x:.3s}Hz: %{y:.1f} dB<extra></extra>"), row=1, col=1)
    fig.add_trace(go.Scatter(x=freqs, y=phase, mode="lines", name="phase", line=dict(color="#D55E00", width=2),
                             hovertemplate="%{x:.3s}Hz: %{y:.0f}°<extra></extra>"), row=2, col=1)
    x_axis = axis(M.gbw_hz, float(freqs[0]), float(freqs[-1]), True, "Frequency")
    x_axis.pop("title")
    fig.update_xaxes(**x_axis, row=1, col=1)
    fig.update_xaxes(**x_axis, title_text="Frequency", row=2, col=1)
    fig.update_yaxes(title_text="Gain (dB)", row=1, col=1)
    fig.update_yaxes(title_text="Phase (°)", row=2, col=1)
    if np.isfinite(gbw) and gbw > 0:
        for r in (1, 2):
            fig.add_vline(x=gbw, line=dict(dash="dot", color="#555", width=1), row=r, col=1)
        text = f"GBW {METRICS[M.gbw_hz].format(gbw)}"
        if np.isfinite(pm):
            text += f" · phase margin {METRICS[M.phase_margin_deg].format(pm)}"
        fig.add_annotation(x=0, y=1.0, xref="paper", yref="paper", text=text, showarrow=False,
                           xanchor="left", yanchor="bottom", font=dict(size=11))
    fig.add_hline(y=0, line=dict(color="#999", width=1), row=1, col=1)
    fig.update_layout(height=380, template="plotly_white", showlegend=False, margin=dict(l=60, r=15, t=30, b=45),
                      title=None, meta=name)
    return fig

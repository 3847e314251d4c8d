"""Axis ticks a person reads ("100 µW", "10 MHz", "80 dB") and ranges that hold the data and the spec line."""

from __future__ import annotations

import math

import numpy as np

from ampfront.topologies.catalog import METRICS


def tick_text(metric_name: str, value: float) -> str:
    m = METRICS[metric_name]
    if m.shown == "eng":
        # Two digits are plenty on an axis; the hover and the tables carry the full figure.
        return m.format(value).replace(".00 ", " ").replace(".0 ", " ")
    unit = m.display_unit or m.unit
    number = value * m.scale
    text = f"{number:,.0f}" if abs(number) >= 1e4 else f"{number:g}"
    return f"{text} {unit}".strip() if unit and unit != "1" else text


def span(values: np.ndarray, log: bool, extra: tuple[float, ...] = ()) -> tuple[float, float]:
    """Low and high of what must be visible (SI values), widened a little so markers are not cut."""
    v = np.asarray(values, float)
    v = np.concatenate([v[np.isfinite(v)], [e for e in extra if e is not None and np.isfinite(e)]])
    if log:
        v = v[v > 0]
    if not len(v):
        return (1.0, 10.0) if log else (0.0, 1.0)
    lo, hi = float(v.min()), float(v.max())
    if log:
        a, b = math.log10(lo), math.log10(hi)
        pad = max(0.06 * (b - a), 0.05)
        return 10 ** (a - pad), 10 ** (b + pad)
    pad = 0.06 * (hi - lo) or max(abs(hi) * 0.05, 1e-30)
    return lo - pad, hi + pad


def ticks(metric_name: str, lo: float, hi: float, log: bool) -> tuple[list[float], list[str]]:
    if log:
        decades = math.log10(hi) - math.log10(lo)
        steps = (1, 2, 5) if decades <= 2.5 else (1, 3) if decades <= 4 else (1,)
        values = [m * 10 ** k for k in range(math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1)
                  for m in steps]
        if decades > 8:
            values = [v for v in values if round(math.log10(v)) % 2 == 0]
    else:
        m = METRICS[metric_name]
        scale = m.scale if m.shown == "fixed" else 1.0
        raw = (hi - lo) * scale / 5
        mag = 10 ** math.floor(math.log10(raw)) if raw > 0 else 1.0
        step = next(s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw) / scale
        values = list(np.arange(math.ceil(lo / step) * step, hi + step * 1e-9, step))
    values = [float(v) for v in values if lo <= v <= hi]
    return values, [tick_text(metric_name, v) for v in values]


def axis(metric_name: str, lo: float, hi: float, log: bool, title: str) -> dict:
    """A plotly axis: log ranges in decades, as plotly takes them; ticks in the metric's own unit."""
    values, text = ticks(metric_name, lo, hi, log)
    rng = [math.log10(lo), math.log10(hi)] if log else [lo, hi]
    return {"type": "log" if log else "linear", "range": rng, "tickmode": "array", "tickvals": values,
            "ticktext": text, "title": {"text": title}, "autorange": False}

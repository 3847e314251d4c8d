"""A schematic of one design, drawn from its Build as inline SVG (any topology, plug-ins included).

Layout: vdd on top, vss at the bottom, every other net that carries channel current a horizontal bar at a
height given by the longest current path below it (an nMOS drain sits above its source, a pMOS source above
its drain, a bias source's current flows downward). Devices in series share a column. Gates, and terminals
of nets with no bar, connect by name (a net label), as schematics for layout review often do.
"""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

import numpy as np

from ampfront.topologies.base import Build
from ampfront.topologies.units import eng

RAILS = {"vdd": "vdd", "vss": "vss", "0": "vss", "gnd": "vss"}
PORTS = ("inp", "inn", "out")
ROW, COL, LEFT, TOP = 96, 168, 70, 40


@dataclass
class _Part:
    kind: str            # "n", "p" (transistors) or "R", "C", "I"
    role: str
    upper: str           # net at the top terminal (drain of nMOS, source of pMOS, `a` of a source)
    lower: str
    gate: str | None
    text: list[str]


def _um(metres: float) -> str:
    value = metres * 1e6
    return f"{value:.0f}" if abs(value) >= 100 else f"{value:.3g}"


def _net(name: str) -> str:
    return RAILS.get(name, name)


def _parts(build: Build, i: int) -> list[_Part]:
    parts = []
    for d in build.devices:
        drain, gate, source, _ = (_net(n) for n in d.nodes)
        upper, lower = (drain, source) if d.polarity == "n" else (source, drain)
        gm, current = float(d.op.gm[i]), float(d.op.id[i])
        text = [d.role, f"W/L {_um(float(d.w[i]))}/{_um(float(d.l[i]))} µm",
                f"ID {eng(current, 'A')}", f"gm/ID {gm / current:.3g} S/A" if current else "gm/ID n/a"]
        parts.append(_Part(d.polarity, d.role, upper, lower, gate, text))
    for e in build.elements:
        unit = {"R": "Ω", "C": "F", "I": "A"}[e.kind]
        parts.append(_Part(e.kind, e.role, _net(e.a), _net(e.b), None, [e.role, eng(float(e.value[i]), unit)]))
    return parts


def _levels(parts: list[_Part]) -> dict[str, float]:
    """Height of each net carrying channel current: vss 0, then the longest path upward, vdd on top."""
    edges = [(p.lower, p.upper) for p in parts if p.kind in "npI" and p.upper != p.lower]
    nets = {n for e in edges for n in e} - {"vdd", "vss"}
    level = {n: 1 for n in nets}
    level["vss"] = 0
    # Longest path by relaxation, bounded so a loop of current (which no amplifier has) cannot hang it.
    for _ in range(len(nets) + 1):
        changed = False
        for lo, hi in edges:
            if hi in ("vdd", "vss") or lo == "vdd":
                continue
            want = level.get(lo, 0) + 1
            if want > level[hi]:
                level[hi] = want
                changed = True
        if not changed:
            break
    level["vdd"] = max([level[n] for n in nets] + [0]) + 1
    return {n: float(v) for n, v in level.items()}


def _columns(parts: list[_Part], level: dict[str, float]) -> list[list[int]]:
    """Parts in series (a net joining exactly one part below to one above) share a column."""
    terminals: dict[str, list[tuple[int, str]]] = {}
    for k, p in enumerate(parts):
        terminals.setdefault(p.upper, []).append((k, "upper"))
        terminals.setdefault(p.lower, []).append((k, "lower"))
    parent = list(range(len(parts)))

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for net, ends in terminals.items():
        if net in ("vdd", "vss") or len(ends) != 2:
            continue
        (a, ta), (b, tb) = ends
        if ta != tb:
            parent[find(a)] = find(b)
    groups: dict[int, list[int]] = {}
    for k in range(len(parts)):
        groups.setdefault(find(k), []).append(k)
    return sorted(groups.values(), key=min)


def _span(p: _Part, level: dict[str, float], inner: dict[str, float]) -> tuple[float, float]:
    top = level.get(p.upper, inner.get(p.upper))
    bottom = level.get(p.lower, inner.get(p.lower))
    return top, bottom


def _inner_levels(columns, parts, level) -> dict[str, float]:
    """Nets that carry no channel current (between a resistor and a capacitor in series) sit evenly
    between the nets that end their chain."""
    inner: dict[str, float] = {}
    for column in columns:
        chain = [parts[k] for k in column]
        nets = [p.upper for p in chain] + [p.lower for p in chain]
        known = [level[n] for n in nets if n in level]
        unknown = [n for n in dict.fromkeys(nets) if n not in level]
        if not unknown:
            continue
        hi, lo = (max(known), min(known)) if known else (1.5, 0.5)
        if hi == lo:
            hi = lo + 0.6
        for j, n in enumerate(unknown, start=1):
            inner[n] = hi - (hi - lo) * j / (len(unknown) + 1)
    return inner


def _mos(x: float, y: float, kind: str, gate: str, diode: bool) -> str:
    out = [f'<line x1="{x}" y1="{y - 16}" x2="{x}" y2="{y + 16}" class="ch"/>',
           f'<line x1="{x - 7}" y1="{y - 12}" x2="{x - 7}" y2="{y + 12}" class="w"/>']
    if kind == "p":
        out.append(f'<circle cx="{x - 11}" cy="{y}" r="3.5" class="bubble"/>')
        out.append(f'<line x1="{x - 15}" y1="{y}" x2="{x - 26}" y2="{y}" class="w"/>')
    else:
        out.append(f'<line x1="{x - 7}" y1="{y}" x2="{x - 26}" y2="{y}" class="w"/>')
        # Arrow out of the source, as an nMOS is drawn.
        out.append(f'<path d="M{x + 1} {y + 10} l-6 -3 l0 6 z" class="arrow"/>')
    if diode:
        top = y - 16 - 10 if kind == "n" else y + 16 + 10
        out.append(f'<polyline points="{x - 26},{y} {x - 26},{top} {x},{top}" class="w"/><circle cx="{x}" '
                   f'cy="{top}" r="2.5" class="dot"/>')
    else:
        out.append(f'<text x="{x - 29}" y="{y + 4}" class="net" text-anchor="end">{escape(gate)}</text>')
    return "".join(out)


def _two_terminal(x: float, y: float, kind: str) -> str:
    if kind == "R":
        zig = " ".join(f"{x + (5 if k % 2 else -5)},{y - 14 + 4 * k}" for k in range(1, 7))
        return (f'<polyline points="{x},{y - 16} {x},{y - 14} {zig} {x},{y + 14} {x},{y + 16}" class="w"/>')
    if kind == "C":
        return (f'<line x1="{x}" y1="{y - 16}" x2="{x}" y2="{y - 4}" class="w"/>'
                f'<line x1="{x - 11}" y1="{y - 4}" x2="{x + 11}" y2="{y - 4}" class="ch"/>'
                f'<line x1="{x - 11}" y1="{y + 4}" x2="{x + 11}" y2="{y + 4}" class="ch"/>'
                f'<line x1="{x}" y1="{y + 4}" x2="{x}" y2="{y + 16}" class="w"/>')
    return (f'<circle cx="{x}" cy="{y}" r="11" class="w src"/><line x1="{x}" y1="{y - 6}" x2="{x}" y2="{y + 6}" '
            f'class="w"/><path d="M{x} {y + 8} l-4 -6 l8 0 z" class="arrow"/>'
            f'<line x1="{x}" y1="{y - 16}" x2="{x}" y2="{y - 11}" class="w"/>'
            f'<line x1="{x}" y1="{y + 11}" x2="{x}" y2="{y + 16}" class="w"/>')


def schematic_svg(build: Build, i: int, title: str, c_load: float | None = None) -> str:
    """Inline SVG of design i of `build`: W/L, drain current and gm/ID beside every device."""
    parts = _parts(build, i)
    level = _levels(parts)
    columns = _columns(parts, level)
    inner = _inner_levels(columns, parts, level)
    top_level = level["vdd"]

    def ypos(v: float) -> float:
        return TOP + (top_level - v) * ROW

    width = LEFT + COL * len(columns) + 40
    height = ypos(0) + 40
    body, where = [], {}   # where: net -> list of x of terminals on its bar
    for c, column in enumerate(columns):
        x = LEFT + COL * c + 40
        for k in column:
            p = parts[k]
            top, bottom = _span(p, level, inner)
            if top is None or bottom is None:
                top, bottom = 1.0, 0.0
            if top <= bottom:
                top = bottom + 0.6
            yt, yb = ypos(top), ypos(bottom)
            y = (yt + yb) / 2
            body.append(f'<line x1="{x}" y1="{yt}" x2="{x}" y2="{y - 16}" class="w"/>'
                        f'<line x1="{x}" y1="{y + 16}" x2="{x}" y2="{yb}" class="w"/>')
            if p.kind in "np":
                body.append(_mos(x, y, p.kind, p.gate or "", p.gate == (p.lower if p.kind == "p" else p.upper)))
            else:
                body.append(_two_terminal(x, y, p.kind))
            lines = "".join(f'<tspan x="{x + 12}" dy="{0 if j == 0 else 11}">{escape(t)}</tspan>'
                            for j, t in enumerate(p.text))
            body.append(f'<text x="{x + 12}" y="{y - 14}" class="lbl">{lines}</text>')
            for net, yy in ((p.upper, yt), (p.lower, yb)):
                where.setdefault(net, []).append((x, yy))
    bars = []
    for net, ends in where.items():
        xs = [e[0] for e in ends]
        yy = ends[0][1]
        if net in ("vdd", "vss"):
            x0, x1 = LEFT, width - 20
        else:
            x0, x1 = min(xs), max(xs)
        if x1 > x0 or net in ("vdd", "vss"):
            bars.append(f'<line x1="{x0}" y1="{yy}" x2="{x1}" y2="{yy}" class="w{" rail" if net in RAILS.values() else ""}"/>')
            bars += [f'<circle cx="{x}" cy="{yy}" r="2.5" class="dot"/>' for x in xs
                     if net not in ("vdd", "vss") and len(xs) > 2]
        # Every net is named where it runs, so a gate's label can be traced to it.
        cls = "port" if net in PORTS else "net"
        bars.append(f'<text x="{x0 - 4}" y="{yy - 4}" class="{cls}" text-anchor="end">{escape(net)}</text>')
    load = ""
    if c_load is not None and "out" in where:
        x, yy = max(e[0] for e in where["out"]), where["out"][0][1]
        load = f'<text x="{x + 12}" y="{yy + 14}" class="lbl">load {escape(eng(c_load, "F"))} on out</text>'
    style = ("<style>.w{stroke:#222;stroke-width:1.3;fill:none}.ch{stroke:#222;stroke-width:3}"
             ".rail{stroke-width:2}.dot,.arrow{fill:#222}.bubble{fill:#fff;stroke:#222;stroke-width:1.3}"
             ".src{fill:#fff}.lbl{font:10px system-ui,sans-serif;fill:#333}.net{font:italic 10px system-ui,"
             "sans-serif;fill:#1b5e8a}.port{font:bold 11px system-ui,sans-serif;fill:#8a1b1b}</style>")
    return (f'<svg xmlns="http://www.w3.org/2000/svg" class="schematic" viewBox="0 0 {width:.0f} {height:.0f}" '
            f'width="{width:.0f}" height="{height:.0f}" role="img" aria-label="{escape(title)}">'
            f"<title>{escape(title)}</title>{style}{''.join(bars)}{''.join(body)}{load}</svg>")


def region(vds: float, vdsat: float, gm_id: float) -> str:
    """Region of operation as a designer names it: saturation or triode, and the inversion level."""
    if not (np.isfinite(vds) and np.isfinite(vdsat) and np.isfinite(gm_id)):
        return "unknown"
    where = "saturation" if vds >= vdsat else "triode"
    # Inversion level from gm/ID: about 2/(n UT) ~ 25-30 S/A is the weak-inversion limit; below ~10 S/A a
    # device is in strong inversion.
    depth = "weak" if gm_id >= 20 else "moderate" if gm_id >= 10 else "strong"
    return f"{where}, {depth} inversion"

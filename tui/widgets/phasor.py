"""A phasor diagram on a character canvas, so a reversed or swapped phase shows at a glance.

Voltages are drawn as rays of ``*`` scaled to the largest voltage, currents as rays of ``o``
scaled to the largest current, each tip labelled (``A``/``B``/``C`` upper case for voltage,
``a``/``b``/``c`` lower case for current). Angles come from the map's ``v_ang``/``i_ang``
registers, referred to the meter's own V_A; a map without them gets no picture, only the
current-to-voltage angle per phase from P and Q, and says so.
"""

from __future__ import annotations

import math

from rich.text import Text
from textual.widgets import Static

from meas.model import Profile
from meas.snapshot import MeterBlock

from ..units import eng
from .palette import DEFAULT, Palette, palette_of
from .readings import below_threshold, current_threshold

PHASES = ("A", "B", "C")
_CELL_ASPECT = 2.0  # a terminal cell is about twice as tall as wide


def _deg(a: float) -> str:
    return f"{a:7.1f}\u00b0" if math.isfinite(a) else "     --\u00b0"


def _ray(
    grid: list[list[str]], cx: int, cy: int, angle_deg: float, length: float, mark: str, tip: str
) -> None:
    """Draw one ray from the centre; positive angles counter-clockwise (mathematical sense)."""
    a = math.radians(angle_deg)
    steps = max(1, int(length * 2))
    for s in range(1, steps + 1):
        r = length * s / steps
        x = cx + round(r * math.cos(a) * _CELL_ASPECT)
        y = cy - round(r * math.sin(a))
        if 0 <= y < len(grid) and 0 <= x < len(grid[0]):
            grid[y][x] = tip if s == steps else (mark if grid[y][x] in " .-|+" else grid[y][x])


def phasor_canvas(
    v: dict[str, tuple[float, float]],
    i: dict[str, tuple[float, float]],
    width: int = 31,
    height: int = 13,
) -> list[str]:
    """Rows of the diagram. ``v``/``i`` map phase -> (magnitude, angle in degrees)."""
    grid = [[" "] * width for _ in range(height)]
    cx, cy = width // 2, height // 2
    for x in range(width):
        grid[cy][x] = "-"
    for y in range(height):
        grid[y][cx] = "|"
    grid[cy][cx] = "+"
    radius = min(cy, (width // 2) / _CELL_ASPECT) - 0.5
    vmax = max((m for m, _ in v.values() if math.isfinite(m)), default=0.0)
    imax = max((m for m, _ in i.values() if math.isfinite(m)), default=0.0)
    for ph, (mag, ang) in i.items():
        if imax > 0 and math.isfinite(mag) and math.isfinite(ang):
            _ray(grid, cx, cy, ang, radius * 0.7 * max(mag / imax, 0.15), "o", ph.lower())
    for ph, (mag, ang) in v.items():
        if vmax > 0 and math.isfinite(mag) and math.isfinite(ang):
            _ray(grid, cx, cy, ang, radius * max(mag / vmax, 0.15), "*", ph.upper())
    return ["".join(row) for row in grid]


def phasor_text(
    profile: Profile,
    meter_id: str,
    block: MeterBlock | None,
    width: int = 31,
    height: int = 11,
    pal: Palette = DEFAULT,
) -> Text:
    out = Text()
    meter = profile.meter(meter_id)
    out.append(f"{meter_id} {meter.label}\n", style="bold")
    if block is None:
        out.append("no reading from this meter yet\n", style=pal.style("muted"))
        return out
    rmap = profile.meter_map(meter_id)
    has_angles = all(rmap.has(f"v_ang.{p}") and rmap.has(f"i_ang.{p}") for p in PHASES)
    dead = below_threshold(profile, meter_id, block)
    if dead:
        out.append(
            f"current below {eng(current_threshold(profile, meter_id), 'A', 0).strip()}: "
            "no current phasors or PF (their angles would be noise)\n",
            style=pal.style("muted"),
        )
    if has_angles:
        v = {p: (block.get(f"v_ln.{p}"), block.get(f"v_ang.{p}")) for p in PHASES}
        i = {
            p: (math.nan, math.nan) if dead else (block.get(f"i.{p}"), block.get(f"i_ang.{p}"))
            for p in PHASES
        }
        out.append("\n".join(phasor_canvas(v, i, width, height)) + "\n")
        out.append("*=V (ABC) o=I (abc), vs V_A, ccw\n", style=pal.style("muted"))
        for p in PHASES:
            mv, av = v[p]
            mi, ai = i[p]
            out.append(f"V{p}{eng(mv, 'V', 7)}{_deg(av)} I{p.lower()}{eng(mi, 'A', 8)}{_deg(ai)}\n")
    else:
        out.append(
            f"map {rmap.id} has no angle registers: no phasor diagram.\n",
            style=pal.style("warn", bold=True),
        )
        out.append("current-to-voltage angle per phase from P and Q (reversed CT ~ 180 deg):\n")
        for p in PHASES:
            pw, qv = block.get(f"p.{p}"), block.get(f"q.{p}")
            phi = (
                math.degrees(math.atan2(qv, pw))
                if math.isfinite(pw) and math.isfinite(qv) and not dead
                else math.nan
            )
            out.append(f"  phase {p}: {eng(block.get(f'i.{p}'), 'A', 9)}  phi {_deg(phi)}\n")
    return out


class PhasorView(Static):
    DEFAULT_CSS = "PhasorView { height: auto; }"

    def __init__(self, profile: Profile, **kw) -> None:
        super().__init__("", **kw)
        self.profile = profile
        self._last: tuple[str, str] | None = None

    def show(self, meter_id: str, block: MeterBlock | None, height: int = 11) -> None:
        pal = palette_of(self.app)
        text = phasor_text(self.profile, meter_id, block, height=height, pal=pal)
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)

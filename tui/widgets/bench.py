"""The bench drawn with characters: each branch between its buses, its switch, live or dead.

Live parts are drawn with heavy lines and dead ones dotted, so the picture reads without
colour; colour only repeats it. Energization is ``meas.network.topology``'s rule, with a
switch of unknown status drawn open: the picture never shows a part live that may be dead.
"""

from __future__ import annotations

from collections.abc import Mapping

from rich.text import Text
from textual.widgets import Static

from meas.model import Profile
from meas.network.topology import branch_conducts, live_buses

from .palette import DEFAULT, Palette, palette_of

LIVE_DOT, DEAD_DOT = "\u25cf", "\u25cb"
KIND_GLYPH = {"source": "\u25c9 source", "load": "\u25bc load", "shunt": "\u2307 shunt"}


def bench_text(profile: Profile, switch_states: Mapping[str, str], pal: Palette = DEFAULT) -> Text:
    live = live_buses(profile, switch_states)
    conducts = branch_conducts(profile, switch_states)
    out = Text()
    out.append("bus ", style="bold")
    for bus in profile.buses:
        on = bus.id in live
        dot = LIVE_DOT if on else DEAD_DOT
        out.append(
            f"{bus.id}{dot} ", style=pal.style("ok", bold=True) if on else pal.style("muted")
        )
    out.append("(\u25cf live \u25cb dead)\n", style=pal.style("muted"))
    switch_of = {sw.branch: sw for sw in profile.switches}
    meters_of: dict[str, list[str]] = {}
    for m in profile.meters:
        if m.branch:
            meters_of.setdefault(m.branch, []).append(m.id)
    for br in profile.branches:
        sw = switch_of.get(br.id)
        cond = conducts[br.id] is True
        ends_live = all(b in live for b in br.buses) if br.to_bus else br.from_bus in live
        live_br = cond and ends_live
        wire = "\u2501\u2501" if live_br else "\u2504\u2504"
        style = pal.style("ok") if live_br else pal.style("muted")
        if sw is not None:
            state = switch_states.get(sw.id, "unknown")
            glyph = {"closed": "\u25a0 closed", "open": "\u25a1 open  "}.get(state, "? unknown")
            sw_txt = f"[{sw.id} {glyph}]"
        else:
            sw_txt = ""
        out.append(f"{br.id:<4}", style="bold")
        out.append(f"{br.from_bus:>3} ")
        out.append(wire, style=style)
        out.append(sw_txt, style="bold" if sw is not None else style)
        out.append(wire, style=style)
        far = br.to_bus if br.to_bus else KIND_GLYPH.get(br.kind, br.kind)
        out.append(f" {far}", style=style if br.to_bus is None else "")
        tags = meters_of.get(br.id)
        if tags:
            out.append("  " + ",".join(tags), style=pal.style("muted"))
        out.append("\n")
    return out


class BenchView(Static):
    DEFAULT_CSS = "BenchView { height: auto; }"

    def __init__(self, profile: Profile, **kw) -> None:
        super().__init__("", **kw)
        self.profile = profile
        self._last: tuple | None = None

    def show(self, switch_states: Mapping[str, str]) -> None:
        pal = palette_of(self.app)
        key = (tuple(sorted(switch_states.items())), pal.name)
        if key != self._last:
            self._last = key
            self.update(bench_text(self.profile, switch_states, pal))

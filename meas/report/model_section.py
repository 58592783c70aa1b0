"""The report's first-page block beside the verdict: what the network model verified.

From the dataset's ``meter_gains`` and ``coverage`` tables (the session's joint estimate) and the
verdict's unverified readings: one row per meter with its gains (± u, flagged beyond its class)
and which error kinds the session could detect; the causes found; the readings nothing could
verify, each with why. Built for a printed A4 page: one compact table and short lists.
"""

from __future__ import annotations

import html
import math
import re
from dataclasses import dataclass

import pandas as pd

from .rows import ReportData
from .text import plain

MAX_GROUPS = 8  # unverified groups shown; the rest are counted (the events table has them all)
_LINE = re.compile(r"^(?P<step>\S+) (?P<meter>[^\s:]+): (?P<why>.+)$")
PER_STEP = (
    "Step by step, as the verdict lists them: each step's captures are checked against the "
    "model on their own, with less redundancy than the whole session above."
)
LEGEND = (
    "Gains ± u (k = 1). Ratio columns: the smallest ratio error this session could detect; "
    "reversed CT and swapped inputs: the phases and pairs it could detect."
)
_KIND_WORDS = {
    "vt_ratio": "VT ratio",
    "ct_ratio": "CT ratio",
    "ct_reversed": "reversed CT",
    "phases_swapped": "swapped inputs",
}


@dataclass(frozen=True)
class MeterLine:
    """One meter's row of the block: gains and what could be detected."""

    meter: str
    voltage: str
    voltage_beyond: bool
    current: str
    current_beyond: bool
    vt: str
    ct: str
    reversed_ct: str
    swapped: str


@dataclass(frozen=True)
class UnverifiedGroup:
    why: str
    meters: tuple[str, ...]
    steps: tuple[str, ...]


def _gain_text(row: pd.Series | None) -> tuple[str, bool]:
    if row is None or pd.isna(row["gain"]):
        return "-", False
    beyond = bool(row["beyond_class"])
    text = f"{row['gain']:.4f} ± {row['u']:.4f}"
    if beyond:
        text += f" beyond class ±{100 * float(row['class_limit']):.2g} %"
    return text, beyond


def _ratio_text(cov: pd.DataFrame, kind: str) -> str:
    sub = cov[cov["error_kind"] == kind]
    if sub.empty:
        return "-"
    r = sub.iloc[0]
    if not bool(r["detectable"]):
        return "no"
    f = r["min_factor"]
    return f"±{100 * float(f):.1f} %" if not pd.isna(f) else "yes"


def _set_text(cov: pd.DataFrame, prefix: str) -> str:
    """Which phases (or pairs) of an error kind are detectable: "A B C", "no", "A B (not C)"."""
    sub = cov[cov["error_kind"].str.startswith(prefix + ":")]
    if sub.empty:
        return "-"
    args = [str(k).split(":", 1)[1] for k in sub["error_kind"]]
    yes = [a for a, d in zip(args, sub["detectable"], strict=True) if bool(d)]
    no = [a for a in args if a not in yes]
    if not yes:
        return "no"
    return " ".join(yes) + (f" (not {' '.join(no)})" if no else "")


def meter_lines(rd: ReportData) -> list[MeterLine]:
    g, c = rd.gains, rd.coverage
    meters = list(dict.fromkeys([*g.get("meter", pd.Series()), *c.get("meter", pd.Series())]))
    out = []
    for m in meters:
        gm = g[g["meter"] == m] if not g.empty else g
        cm = c[c["meter"] == m] if not c.empty else c

        def pick(q: str, gm: pd.DataFrame = gm) -> pd.Series | None:
            s = gm[gm["quantity"] == q] if not gm.empty else gm
            return None if s.empty else s.iloc[0]

        v, vb = _gain_text(pick("voltage"))
        i, ib = _gain_text(pick("current"))
        empty = cm.empty
        out.append(
            MeterLine(
                str(m),
                v,
                vb,
                i,
                ib,
                "-" if empty else _ratio_text(cm, "vt_ratio"),
                "-" if empty else _ratio_text(cm, "ct_ratio"),
                "-" if empty else _set_text(cm, "ct_reversed"),
                "-" if empty else _set_text(cm, "phases_swapped"),
            )
        )
    return out


def causes(rd: ReportData) -> list[str]:
    """The sentences of the gains table (findings and gains beyond class), each once."""
    if rd.gains.empty:
        return []
    return list(dict.fromkeys(plain(m) for m in rd.gains["message"] if plain(m)))


def not_detectable(rd: ReportData) -> list[tuple[str, list[str]]]:
    """(why, ["M4 CT ratio", ...]) for the error kinds the session could not detect."""
    c = rd.coverage
    if c.empty:
        return []
    out: dict[str, list[str]] = {}
    for r in c[~c["detectable"].astype(bool)].itertuples(index=False):
        kind, _, arg = str(r.error_kind).partition(":")
        label = _KIND_WORDS.get(kind, kind.replace("_", " ")) + (f" {arg}" if arg else "")
        out.setdefault(plain(r.why_not) or "not detectable", []).append(f"{r.meter} {label}")
    return list(out.items())


def unverified_groups(lines: tuple[str, ...] | list[str]) -> list[UnverifiedGroup]:
    """The verdict's "STEP METER: why" lines grouped by why, with their meters and steps."""
    groups: dict[str, tuple[list[str], list[str]]] = {}
    for line in lines:
        m = _LINE.match(line)
        step, meter, why = (m["step"], m["meter"], m["why"]) if m else ("", "", line)
        meters, steps = groups.setdefault(why, ([], []))
        if meter and meter not in meters:
            meters.append(meter)
        if step and step not in steps:
            steps.append(step)
    return [UnverifiedGroup(w, tuple(ms), tuple(ss)) for w, (ms, ss) in groups.items()]


def estimate_line(rd: ReportData) -> str:
    """One sentence on the estimate itself, or why there is none."""
    est = rd.ds.meta.get("estimate")
    if not isinstance(est, dict):
        return (
            "This dataset predates the session estimate (dataset format 2.0): no meter gains or "
            "coverage are recorded."
        )
    if not est.get("estimated"):
        return f"No estimate against the network model: {plain(est.get('reason'))}."
    chi2, dof, lim = est.get("chi2"), est.get("dof"), est.get("chi2_limit")
    fit = (
        f"chi-square {chi2:.1f} for {dof} degrees of freedom, 99 % limit {lim:.1f}"
        if isinstance(chi2, float) and isinstance(lim, float) and math.isfinite(lim)
        else "no redundancy left to test the fit"
    )
    return (
        f"One estimate over the {est.get('steps')} captured step configurations of the session "
        f"({fit}); gains are reading over what the network implies, ± their standard "
        "uncertainty."
    )


def _e(x: object) -> str:
    return html.escape(plain(x))


def _group_text(g: UnverifiedGroup) -> str:
    steps = ", ".join(g.steps[:6]) + (f" and {len(g.steps) - 6} more" if len(g.steps) > 6 else "")
    who = ", ".join(g.meters)
    return f"{g.why} ({who}{'; ' if who and steps else ''}{'steps ' + steps if steps else ''})"


def model_html(rd: ReportData) -> list[str]:
    out = ['<section class="model">', "<h2>Verified against the network model</h2>"]
    out.append(f'<p class="lead">{_e(estimate_line(rd))}</p>')
    lines = meter_lines(rd)
    if lines:
        head = [
            "meter",
            "voltage gain",
            "current gain",
            "VT ratio error",
            "CT ratio error",
            "reversed CT",
            "swapped inputs",
        ]
        body = []
        for m in lines:
            v = f'<span class="fail">{_e(m.voltage)}</span>' if m.voltage_beyond else _e(m.voltage)
            i = f'<span class="fail">{_e(m.current)}</span>' if m.current_beyond else _e(m.current)
            cells = [_e(m.meter), v, i, _e(m.vt), _e(m.ct), _e(m.reversed_ct), _e(m.swapped)]
            body.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
        out.append(
            '<table class="coverage"><thead><tr>'
            + "".join(f"<th>{html.escape(h)}</th>" for h in head)
            + '</tr><tr class="sub"><th></th><th colspan="2">± u (k = 1)</th>'
            '<th colspan="4">error kinds this session could detect (ratios: beyond)</th></tr>'
            "</thead><tbody>" + "".join(body) + "</tbody></table>"
        )
    found = causes(rd)
    if found:
        out.append('<ul class="causes">' + "".join(f"<li>{_e(s)}</li>" for s in found) + "</ul>")
    elif lines:
        out.append("<p>No meter gain lies beyond its class.</p>")
    nd = not_detectable(rd)
    if nd:
        out.append(
            '<p class="small">Not detectable: '
            + "; ".join(f"{_e(', '.join(who))}: {_e(why)}" for why, who in nd)
            + ".</p>"
        )
    groups = unverified_groups(rd.verdict.unverified)
    if groups:
        n = len(rd.verdict.unverified)
        out.append(f"<h3>Unverified readings ({n}), each with why</h3>")
        out.append(f'<p class="small">{html.escape(PER_STEP)}</p>')
        items = "".join(f"<li>{_e(_group_text(g))}</li>" for g in groups[:MAX_GROUPS])
        more = len(groups) - MAX_GROUPS
        if more > 0:
            items += (
                f"<li>and {more} more reasons (the dataset's events of kind "
                "readings_unverified list every one)</li>"
            )
        out.append(f'<ul class="unverified">{items}</ul>')
    else:
        out.append("<p>The verdict lists no unverified reading.</p>")
    out.append("</section>")
    return out


def model_markdown(rd: ReportData) -> list[str]:
    out = ["## Verified against the network model", "", estimate_line(rd), ""]
    lines = meter_lines(rd)
    if lines:
        out.append(
            "| meter | voltage gain ± u | current gain ± u | VT ratio error | CT ratio error "
            "| reversed CT | swapped inputs |"
        )
        out.append("|---|---|---|---|---|---|---|")
        for m in lines:
            v = f"**{m.voltage}**" if m.voltage_beyond else m.voltage
            i = f"**{m.current}**" if m.current_beyond else m.current
            out.append(
                f"| {m.meter} | {v} | {i} | {m.vt} | {m.ct} | {m.reversed_ct} | {m.swapped} |"
            )
        out += ["", LEGEND, ""]
    found = causes(rd)
    out += [f"- {s}" for s in found] or (["No meter gain lies beyond its class."] if lines else [])
    nd = not_detectable(rd)
    if nd:
        out += ["", "Not detectable: " + "; ".join(f"{', '.join(w)}: {y}" for y, w in nd) + "."]
    groups = unverified_groups(rd.verdict.unverified)
    out.append("")
    if groups:
        out += [f"### Unverified readings ({len(rd.verdict.unverified)}), each with why", ""]
        out += [PER_STEP, ""]
        out += [f"- {_group_text(g)}" for g in groups[:MAX_GROUPS]]
        if len(groups) > MAX_GROUPS:
            out.append(
                f"- and {len(groups) - MAX_GROUPS} more reasons (events readings_unverified)"
            )
    else:
        out.append("The verdict lists no unverified reading.")
    out.append("")
    return out

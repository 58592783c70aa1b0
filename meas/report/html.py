"""The report as one self-contained HTML page: inline CSS and SVG, no scripts, no external references.

So the file can be mailed, archived and printed as it is. The verdict is the first line; the
print stylesheet sets A4 pages with page numbers and a running header (session, revision).
"""

from __future__ import annotations

import html

import pandas as pd

from ..cautions import REPORT_CAUTION as CAUTION
from .charts import balance_svg
from .fault_section import fault_html
from .model_section import model_html
from .names import check_name
from .phasor_svg import phasor_figures
from .rows import (
    KEY_READINGS,
    PHASE_ROWS,
    ReportData,
    issue_rows,
    meter_rows,
    outcome_word,
    phase_values,
    step_rows,
)
from .text import fmt, fmt_res, plain

CSS = """
.phasors{display:flex;flex-wrap:wrap;gap:6px}.phasor{margin:0;text-align:center;font-size:80%}
body{font:14px/1.45 Georgia,"Times New Roman",serif;color:#1d1d1b;margin:2rem auto;max-width:60rem;padding:0 1rem}
h1{font-size:1.6rem;border-bottom:3px double #1d1d1b;padding-bottom:.3rem}
h2{font-size:1.2rem;margin-top:2rem;border-bottom:1px solid #999}
h3{font-size:1rem;margin:1.2rem 0 .3rem}
table{border-collapse:collapse;width:100%;margin:.4rem 0 1rem;font:12px/1.35 "Helvetica Neue",Arial,sans-serif}
th,td{border:1px solid #bbb;padding:.2rem .4rem;text-align:left;vertical-align:top}
th{background:#eceae4}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.caution{border:2px solid #b3261e;padding:.6rem .9rem;margin:1rem 0;background:#fdf3f2}
.caution strong{color:#b3261e}
.meta td:first-child{width:12rem;font-weight:bold}
.fail{color:#b3261e;font-weight:bold}.waived{color:#b26a00;font-weight:bold}
.id{display:block;font-size:.78em;color:#666;font-family:monospace}
.chart{font:11px Arial,sans-serif}.chart .label{text-anchor:end}.chart .tick{fill:#555}
.chart .grid{stroke:#ddd}.chart .limit{stroke:#1d1d1b;stroke-width:2;stroke-dasharray:4 3}
.sign td{height:2.2rem}
.verdict{font:bold 1.25rem/1.3 "Helvetica Neue",Arial,sans-serif;padding:.5rem .8rem;margin:0 0 1rem;border:3px solid}
.verdict.pass{border-color:#1e6b34;color:#1e6b34}.verdict.unverified{border-color:#8a6100;color:#8a6100}
.verdict.bad{border-color:#b3261e;color:#b3261e}
.sim{display:block;font-size:.9rem;color:#6a1b9a}.note{font-style:italic;margin-top:.2rem}
.runhead{display:none}
@media print{body{margin:0;max-width:none;font-size:10.5pt}h2{break-after:avoid}h3{break-after:avoid}
tr,svg,.verdict,.meta,.fig{break-inside:avoid}thead{display:table-header-group}}
.findings td:nth-child(6){width:34%}.findings td:nth-child(2){width:16%}
.phases{font-size:11px}
.model{margin-bottom:1.2rem}.model h2{margin-top:1rem}.model .lead{margin:.2rem 0 .4rem}
table.coverage{font-size:11px}table.coverage td{white-space:nowrap}table.coverage td:nth-child(2),table.coverage td:nth-child(3){white-space:nowrap;font-variant-numeric:tabular-nums}
table.coverage tr.sub th{font-weight:normal;font-style:italic;background:#f6f5f1}
.causes{margin:.2rem 0 .5rem;padding-left:1.2rem}.causes li{color:#b3261e;font-weight:bold}
.small{font-size:12px;color:#333}.unverified{font-size:12px;margin:.2rem 0;padding-left:1.2rem}
@media print{.model h2{margin-top:.4rem}table.coverage{font-size:8.5pt}.unverified,.small{font-size:8.5pt}}
"""

# A4 pages, page numbers and a running header; the header text is set per report
PAGE_CSS = """
@page{size:A4;margin:20mm 15mm 18mm 15mm;
@top-left{content:"%s";font:9pt Arial,sans-serif;color:#444}
@bottom-right{content:"Page " counter(page) " of " counter(pages);font:9pt Arial,sans-serif;color:#444}}
"""


def _table(
    headers: list[str], rows: list[list[str]], numeric: set[int] | None = None, cls: str = ""
) -> str:
    numeric = numeric or set()
    head = "".join(f"<th>{html.escape(h)}</th>" for h in headers)
    body = "".join(
        "<tr>"
        + "".join(
            f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>"
            for i, c in enumerate(r)
        )
        + "</tr>"
        for r in rows
    )
    klass = f' class="{cls}"' if cls else ""
    return f"<table{klass}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _e(x: object) -> str:
    return html.escape(plain(x))


def _css_text(s: str) -> str:
    """Text safe inside a CSS string: no quote, backslash or angle bracket can end it."""
    return "".join(ch for ch in s if ch not in '"\\<>\n\r')


def running_header(rd: ReportData) -> str:
    meta, cover = rd.ds.meta, rd.profile.cover if rd.profile is not None else None
    parts = [f"Commissioning report, session {meta.get('session')}"]
    if cover is not None and cover.document:
        parts.append(f"document {cover.document}")
    if cover is not None and cover.revision:
        parts.append(f"revision {cover.revision}")
    return " \u00b7 ".join(parts)


def verdict_banner(rd: ReportData) -> str:
    """The report's first line: the session verdict, and SIMULATED when it is."""
    v = rd.verdict
    cls = "pass" if v.word == "PASS" else ("unverified" if v.word.startswith("PASS") else "bad")
    sim = (
        ' <span class="sim">SIMULATED BENCH: these readings come from the simulator, '
        "not from plant</span>"
        if rd.simulated
        else ""
    )
    return f'<p class="verdict {cls}">Verdict: {html.escape(v.line)}{sim}</p>'


def notes_html(rd: ReportData, step_id: str) -> str:
    sub = rd.notes[rd.notes["step"] == step_id]
    said = set(rd.ds["steps"].loc[rd.ds["steps"]["id"] == step_id, "reason"].dropna())
    sub = sub[~sub["message"].isin(said)]  # a note step's note is already its reason
    return "".join(
        f'<div class="note">note ({_e(n.operator)}): {_e(n.message)}</div>'
        for n in sub.itertuples(index=False)
    )


def _named(check_id: str) -> str:
    """Plain-language name, the id in small print under it."""
    return f'{html.escape(check_name(check_id))}<span class="id">{html.escape(check_id)}</span>'


def _time(x: object, day: str = "") -> str:
    """A UTC timestamp to the second; the time of day alone when it falls on ``day``."""
    if x is None or x is pd.NaT or (isinstance(x, float) and x != x):
        return ""
    try:
        t = pd.Timestamp(str(x))
    except (ValueError, TypeError):
        return plain(x)
    return (
        t.strftime("%H:%M:%S") if t.strftime("%Y-%m-%d") == day else t.strftime("%Y-%m-%d %H:%M:%S")
    )


def session_day(rd: ReportData) -> str:
    """The session's start date (UTC), which step times on that day leave out."""
    return plain(rd.ds.meta.get("session_started_utc"))[:10]


def _cover(rd: ReportData) -> list[str]:
    meta = rd.ds.meta
    cover = rd.profile.cover if rd.profile is not None else None
    facts: list[tuple[str, object]] = []
    if cover is not None:
        facts += [
            (k, v)
            for k, v in (
                ("Project", cover.project),
                ("Site", cover.site),
                ("Document number", cover.document),
                ("Revision", cover.revision),
            )
            if v
        ]
    facts += [
        ("Session", meta.get("session")),
        ("Operator", meta.get("operator")),
        ("Session started (UTC)", meta.get("session_started_utc")),
        ("Data source", "simulated bench" if rd.simulated else "bench meters"),
        ("Profile sha256", meta.get("profile_sha256")),
        ("Recorded with", meta.get("software")),
        ("Dataset", rd.ds.path.name),
    ]
    rows = "".join(f"<tr><td>{_e(k)}</td><td>{_e(v)}</td></tr>" for k, v in facts)
    return [f'<table class="meta"><tbody>{rows}</tbody></table>']


def _instruments(rd: ReportData) -> list[str]:
    ds, meta = rd.ds, rd.ds.meta
    serials = {m.id: m for m in rd.profile.meters} if rd.profile is not None else {}
    has_cal = any(m.serial or m.calibration_due for m in serials.values())
    out = [
        "<h2>Bench and instruments</h2>",
        f"<p>Sign convention: {_e(meta.get('sign_convention'))}. Values are primary, "
        "bench-side SI units.</p>",
    ]
    head = ["meter", "label", "map", "bus -> branch", "reports", "CT ratio", "VT ratio", "classes"]
    head += ["serial", "calibration due"] if has_cal else ["endpoint"]
    mrows = []
    for m in meter_rows(ds):
        row = [
            _e(m.id),
            _e(m.label),
            _e(m.map),
            _e(f"{m.bus} -> {plain(m.branch) or '(voltage only)'}"),
            _e(m.reports),
            _e(fmt(m.ct_ratio)),
            _e(fmt(m.vt_ratio)),
            _e(f"P {m.class_p}, Q {m.class_q}, V {m.class_v}, I {m.class_i}"),
        ]
        p = serials.get(m.id)
        row += [_e(p.serial), _e(p.calibration_due)] if has_cal and p else [_e(m.endpoint)]
        mrows.append(row)
    out.append(_table(head, mrows, {5, 6}))
    kit = rd.profile.cover.test_equipment if rd.profile is not None else ()
    if kit:
        out.append("<h3>Test equipment</h3>")
        out.append(
            _table(
                ["instrument", "serial", "calibration due"],
                [[_e(k.name), _e(k.serial), _e(k.calibration_due)] for k in kit],
            )
        )
    return out


def _sequence(rd: ReportData) -> list[str]:
    day = session_day(rd)
    rows = [
        [
            str(s.step_number),
            _e(s.id),
            _e(s.title),
            _e(s.kind),
            _e(outcome_word(s)),
            _e(s.operator),
            _e(_time(s.started_utc, day)),
            _e(_time(s.ended_utc, day)),
            _e(fmt_res(s.settle_s, "s")),
            _e(s.reason) + notes_html(rd, s.id),
        ]
        for s in step_rows(rd.ds["steps"])
    ]
    head = ["#", "step", "title", "kind", "outcome", "operator"]
    head += [f"started (UTC, {day})", "ended (UTC)"]
    head += ["settle s", "reason and notes"]
    return ["<h2>Sequence</h2>", _table(head, rows, {0, 8})]


def _findings(rd: ReportData) -> list[str]:
    out = [
        "<h2>Findings</h2>",
        "<p>Failed checks, one row per step, check, subject and cause; <em>snapshots</em> "
        "counts the captured snapshots where it failed, value and limit are their medians.</p>",
    ]
    if rd.issues.empty:
        out.append("<p>No check failed in this session.</p>")
        return out
    rows = []
    for r in issue_rows(rd.issues):
        tag = (
            '<span class="waived">waived</span>' if r.waived else '<span class="fail">failed</span>'
        )
        why = f"<br>reason: {_e(r.reason)}" if r.waived and r.reason else ""
        unit = plain(r.unit)
        rows.append(
            [
                _e(r.step),
                _named(r.check),
                _e(r.subject),
                _e(r.cause) or "-",
                tag + why,
                _e(r.message),
                _e(f"{fmt_res(r.value, unit)} {unit}".strip()),
                _e(f"{fmt_res(r.limit, unit)} {unit}".strip()),
                str(r.count),
            ]
        )
    head = ["step", "check", "subject", "cause", "status", "finding", "value", "limit"]
    out.append(_table(head + ["snapshots"], rows, {6, 7, 8}, cls="findings"))
    return out


def _phase_table(rd: ReportData, step_id: str) -> str:
    """One row per meter: each quantity of ``PHASE_ROWS`` on phases A, B and C."""
    sub = rd.phases[rd.phases["step"] == step_id]
    if sub.empty:
        return ""
    val = phase_values(rd.phases, step_id)
    rows = []
    for meter in dict.fromkeys(sub["meter"]):
        cells = [fmt_res(val.get((meter, f"{q}.{p}")), u) for _, q, u in PHASE_ROWS for p in "ABC"]
        rows.append([_e(meter), *map(_e, cells)])
    head = ["meter"] + [f"{t} {p} [{u}]" for t, _, u in PHASE_ROWS for p in "ABC"]
    return _table(head, rows, set(range(1, len(head))), cls="phases")


def _failing_chart(rd: ReportData, step_id: str) -> str:
    """Every check kind that failed in the step, as bars against its limit (not only the bus
    balances: a step failing on a meter or branch check shows it here)."""
    if rd.issues.empty:
        return ""
    sub = rd.issues[(rd.issues["step"] == step_id) & (rd.issues["limit"] > 0)]
    if sub.empty:
        return ""
    rows = pd.DataFrame(
        {
            "step": sub["step"],
            "check": sub["check"],
            "subject": sub["subject"],
            "value": sub["value"].abs(),
            "limit": sub["limit"],
            "unit": sub["unit"],
            "worst": "fail",
            "residual": sub["value"].abs() / sub["limit"],
        }
    )
    return (
        '<div class="fig"><p>Failed checks of this step: median value over the failing captures '
        "against its limit.</p>"
        + balance_svg(rows, title="failed checks against their limits")
        + "</div>"
    )


def _readings(rd: ReportData) -> list[str]:
    out = [
        "<h2>Readings per step</h2><p>Medians over the step's captures, values of quality ok, "
        "rounded to the display resolution; V and I averages are the mean of the three phases, "
        "the per-phase table gives each phase.</p>"
    ]
    for s in step_rows(rd.ds["steps"]):
        sub = rd.readings[rd.readings["step"] == s.id] if not rd.readings.empty else rd.readings
        bal = rd.balance[rd.balance["step"] == s.id]
        phases = _phase_table(rd, s.id)
        if sub.empty and bal.empty and not phases:
            continue
        day = session_day(rd)
        times = " to ".join(t for t in (_time(s.started_utc, day), _time(s.ended_utc, day)) if t)
        out.append(
            f"<h3>{s.step_number}. {_e(s.title)} <small>({_e(s.id)}; {_e(outcome_word(s))}"
            f"{'; ' + _e(times) + ' UTC' if times else ''})</small></h3>"
        )
        if not sub.empty:
            rows = [
                [_e(r["meter"])] + [_e(fmt_res(r[t], u)) for t, u, _ in KEY_READINGS]
                for _, r in sub.iterrows()
            ]
            out.append(
                _table(["meter"] + [f"{t} [{u}]" for t, u, _ in KEY_READINGS], rows, {1, 2, 3, 4})
            )
        out.append(phases)
        out.append(phasor_figures(rd.phases, s.id))
        out.append(_failing_chart(rd, s.id))
        if not bal.empty:
            out.append(
                '<div class="fig"><p>Bus balance: median residual over the captures against its '
                f"limit.</p>{balance_svg(bal)}</div>"
            )
    return out


def render_html(rd: ReportData) -> str:
    meta = rd.ds.meta
    title = f"Commissioning report: {plain(meta['bench'])}, session {plain(meta['session'])}"
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{html.escape(title)}</title>",
        f"<style>{CSS}{PAGE_CSS % _css_text(running_header(rd))}</style></head><body>",
        verdict_banner(rd),
        f"<h1>Commissioning report<br><small>{_e(meta['bench'])}</small></h1>",
        f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</div>',
    ]
    out += model_html(rd)
    out += _cover(rd)
    out += _instruments(rd)
    out += _sequence(rd)
    out += _findings(rd)
    out += fault_html(rd.fault)
    out += _readings(rd)
    out.append("<h2>Sign-off</h2>")
    out.append(
        _table(
            ["role", "name", "signature", "date"],
            [
                ["Commissioning engineer", "", "", ""],
                ["Witness", "", "", ""],
                ["Accepted for the owner", "", "", ""],
            ],
        )
    )
    out.append(f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</div>')
    out.append("</body></html>")
    return "\n".join(out) + "\n"

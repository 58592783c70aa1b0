"""The report as one self-contained HTML page: inline CSS and SVG, no scripts, no external references.

So the file can be mailed, archived and printed as it is.
"""

from __future__ import annotations

import html

from ..cautions import REPORT_CAUTION as CAUTION
from .charts import balance_svg
from .rows import KEY_READINGS, ReportData, issue_rows, meter_rows, outcome_word, step_rows
from .text import fmt, plain

CSS = """
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
.chart{font:11px Arial,sans-serif}.chart .label{text-anchor:end}.chart .tick{fill:#555}
.chart .grid{stroke:#ddd}.chart .limit{stroke:#1d1d1b;stroke-width:2;stroke-dasharray:4 3}
.sign td{height:2.2rem}
.verdict{font:bold 1.25rem/1.3 "Helvetica Neue",Arial,sans-serif;padding:.5rem .8rem;margin:0 0 1rem;border:3px solid}
.verdict.pass{border-color:#1e6b34;color:#1e6b34}.verdict.unverified{border-color:#8a6100;color:#8a6100}
.verdict.bad{border-color:#b3261e;color:#b3261e}
.sim{display:block;font-size:.9rem;color:#6a1b9a}.note{font-style:italic;margin-top:.2rem}
@media print{body{margin:0;max-width:none;font-size:11pt}h2{break-after:avoid}table,svg{break-inside:avoid}}
"""


def _table(headers: list[str], rows: list[list[str]], numeric: set[int] | None = None) -> str:
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
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _e(x: object) -> str:
    return html.escape(plain(x))


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
    return "".join(
        f'<div class="note">note ({_e(n.operator)}): {_e(n.message)}</div>'
        for n in sub.itertuples(index=False)
    )


def render_html(rd: ReportData) -> str:
    ds = rd.ds
    meta = ds.meta
    steps = ds["steps"]
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Commissioning report: {_e(meta['bench'])}, session {_e(meta['session'])}</title>",
        f"<style>{CSS}</style></head><body>",
        verdict_banner(rd),
        f"<h1>Commissioning report<br><small>{_e(meta['bench'])}</small></h1>",
        f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</div>',
        '<table class="meta"><tbody>',
    ]
    for k, v in [
        ("Session", meta.get("session")),
        ("Operator", meta.get("operator")),
        ("Session started (UTC)", meta.get("session_started_utc")),
        ("Profile sha256", meta.get("profile_sha256")),
        ("Recorded with", meta.get("software")),
        ("Dataset", ds.path.name),
    ]:
        out.append(f"<tr><td>{_e(k)}</td><td>{_e(v)}</td></tr>")
    out.append("</tbody></table>")

    out.append("<h2>Bench and instruments</h2>")
    out.append(
        f"<p>Sign convention: {_e(meta.get('sign_convention'))}. Values are primary, bench-side SI units.</p>"
    )
    mrows = []
    for m in meter_rows(ds):
        mrows.append(
            [
                _e(m.id),
                _e(m.label),
                _e(m.map),
                _e(f"{m.bus} -> {plain(m.branch) or '(voltage only)'}"),
                _e(m.reports),
                _e(fmt(m.ct_ratio)),
                _e(fmt(m.vt_ratio)),
                _e(f"P {m.class_p}, Q {m.class_q}, V {m.class_v}, I {m.class_i}"),
                _e(m.endpoint),
            ]
        )
    out.append(
        _table(
            [
                "meter",
                "label",
                "map",
                "bus -> branch",
                "reports",
                "CT ratio",
                "VT ratio",
                "classes",
                "endpoint",
            ],
            mrows,
            {5, 6},
        )
    )

    out.append("<h2>Sequence</h2>")
    srows = []
    for s in step_rows(steps):
        srows.append(
            [
                str(s.order),
                _e(s.id),
                _e(s.title),
                _e(s.kind),
                _e(s.state or "not reached"),
                _e(outcome_word(s)),
                _e(s.operator),
                _e(fmt(s.settle_s, 3)),
                _e(s.reason) + notes_html(rd, s.id),
            ]
        )
    out.append(
        _table(
            ["#", "step", "title", "kind", "state", "outcome", "operator", "settle s", "reason"],
            srows,
            {0, 7},
        )
    )

    out.append("<h2>Failed and waived checks</h2>")
    if rd.issues.empty:
        out.append("<p>No check failed in this session.</p>")
    else:
        irows = []
        for r in issue_rows(rd.issues):
            tag = (
                '<span class="waived">waived</span>'
                if r.waived
                else '<span class="fail">failed</span>'
            )
            why = f"<br>reason: {_e(r.reason)}" if r.waived and r.reason else ""
            irows.append(
                [
                    _e(r.step),
                    _e(r.check),
                    _e(r.subject),
                    tag + why,
                    _e(r.message),
                    _e(f"{fmt(r.value)} / {fmt(r.limit)} {plain(r.unit)}"),
                    str(r.count),
                ]
            )
        out.append(
            _table(
                ["step", "check", "subject", "", "finding", "median value / limit", "snapshots"],
                irows,
                {6},
            )
        )

    out.append(
        "<h2>Key readings per step</h2><p>Median over the step's captures of each snapshot's value "
        "(V and I: mean of the three phases). Only values of quality ok.</p>"
    )
    for s in step_rows(steps):
        sub = rd.readings[rd.readings["step"] == s.id] if not rd.readings.empty else rd.readings
        bal = rd.balance[rd.balance["step"] == s.id]
        if sub.empty and bal.empty:
            continue
        out.append(f"<h3>{s.order}. {_e(s.title)} <small>({_e(s.id)})</small></h3>")
        if not sub.empty:
            rows = [
                [_e(r["meter"])] + [_e(fmt(r[t])) for t, _, _ in KEY_READINGS]
                for _, r in sub.iterrows()
            ]
            out.append(
                _table(["meter"] + [f"{t} [{u}]" for t, u, _ in KEY_READINGS], rows, {1, 2, 3, 4})
            )
        if not bal.empty:
            out.append("<p>Bus balance: median residual over the captures against its limit.</p>")
            out.append(balance_svg(bal))

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

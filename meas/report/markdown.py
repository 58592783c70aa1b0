"""The report as Markdown: the same sections as the HTML page, as text that diffs and greps."""

from __future__ import annotations

from collections.abc import Sequence

from ..cautions import REPORT_CAUTION as CAUTION
from .fault_section import fault_markdown
from .html import _time
from .model_section import model_markdown
from .names import check_name
from .rows import (
    KEY_READINGS,
    PHASE_ROWS,
    ReportData,
    balance_rows,
    issue_rows,
    meter_rows,
    outcome_word,
    phase_values,
    step_rows,
)
from .text import fmt, fmt_res, plain


def _md_table(headers: list[str], rows: Sequence[Sequence[object]]) -> str:
    esc = lambda c: plain(c).replace("|", "\\|").replace("\n", " ")  # noqa: E731
    lines = ["| " + " | ".join(headers) + " |", "|" + "---|" * len(headers)]
    lines += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
    return "\n".join(lines)


def render_markdown(rd: ReportData) -> str:
    ds, meta = rd.ds, rd.ds.meta
    sim = (
        " SIMULATED BENCH: these readings come from the simulator, not from plant."
        if rd.simulated
        else ""
    )
    out = [
        f"**Verdict: {rd.verdict.line}**{sim}",
        "",
        f"# Commissioning report: {meta['bench']}",
        "",
        f"> **Caution.** {CAUTION}",
        "",
        *model_markdown(rd),
        f"- Session: {meta.get('session')}",
        f"- Operator: {meta.get('operator')}",
        f"- Session started (UTC): {meta.get('session_started_utc')}",
        f"- Profile sha256: `{meta.get('profile_sha256')}`",
        f"- Recorded with: {meta.get('software')}",
        "",
        "## Bench and instruments",
        "",
        f"Sign convention: {meta.get('sign_convention')}.",
        "",
        _md_table(
            ["meter", "label", "bus -> branch", "reports", "CT ratio", "VT ratio", "classes"],
            [
                [
                    m.id,
                    m.label,
                    f"{m.bus} -> {plain(m.branch) or '(voltage only)'}",
                    m.reports,
                    fmt(m.ct_ratio),
                    fmt(m.vt_ratio),
                    f"P {m.class_p}, Q {m.class_q}, V {m.class_v}, I {m.class_i}",
                ]
                for m in meter_rows(ds)
            ],
        ),
        "",
        "## Sequence",
        "",
        _md_table(
            ["#", "step", "title", "outcome", "operator", "started (UTC)", "ended (UTC)", "reason"],
            [
                [
                    s.step_number,
                    s.id,
                    s.title,
                    outcome_word(s),
                    s.operator,
                    _time(s.started_utc),
                    _time(s.ended_utc),
                    " ".join(
                        [plain(s.reason)]
                        + [
                            f"note ({plain(n.operator)}): {plain(n.message)}"
                            for n in rd.notes[rd.notes["step"] == s.id].itertuples(index=False)
                        ]
                    ).strip(),
                ]
                for s in step_rows(ds["steps"])
            ],
        ),
        "",
        "## Findings",
        "",
    ]
    if rd.issues.empty:
        out.append("No check failed in this session.")
    else:
        out.append(
            _md_table(
                [
                    "step",
                    "check",
                    "subject",
                    "cause",
                    "status",
                    "finding",
                    "value",
                    "limit",
                    "snapshots",
                ],
                [
                    [
                        r.step,
                        f"{check_name(r.check)} ({r.check})",
                        r.subject,
                        plain(r.cause) or "-",
                        ("waived: " + r.reason) if r.waived else "failed",
                        r.message,
                        f"{fmt_res(r.value, plain(r.unit))} {plain(r.unit)}".strip(),
                        f"{fmt_res(r.limit, plain(r.unit))} {plain(r.unit)}".strip(),
                        r.count,
                    ]
                    for r in issue_rows(rd.issues)
                ],
            )
        )
    out += ["", *fault_markdown(rd.fault)]
    out += [
        "",
        "## Key readings per step",
        "",
        "Median over the step's captures (V and I: mean of the three phases).",
        "",
    ]
    for s in step_rows(ds["steps"]):
        sub = rd.readings[rd.readings["step"] == s.id] if not rd.readings.empty else rd.readings
        bal = rd.balance[rd.balance["step"] == s.id]
        if sub.empty and bal.empty:
            continue
        out += [f"### {s.step_number}. {s.title} ({s.id})", ""]
        if not sub.empty:
            out.append(
                _md_table(
                    ["meter"] + [f"{t} [{u}]" for t, u, _ in KEY_READINGS],
                    [
                        [r["meter"]] + [fmt_res(r[t], u) for t, u, _ in KEY_READINGS]
                        for _, r in sub.iterrows()
                    ],
                )
            )
            out.append("")
        ph = rd.phases[rd.phases["step"] == s.id]
        if not ph.empty:
            val = phase_values(rd.phases, s.id)
            out.append(
                _md_table(
                    ["meter", "quantity", "phase A", "phase B", "phase C"],
                    [
                        [meter, f"{title} [{unit}]"]
                        + [fmt_res(val.get((meter, f"{q}.{p}")), unit) for p in "ABC"]
                        for meter in dict.fromkeys(ph["meter"])
                        for title, q, unit in PHASE_ROWS
                    ],
                )
            )
            out.append("")
        if not bal.empty:
            out.append(
                _md_table(
                    ["bus", "check", "median value", "limit", "residual", "worst"],
                    [
                        [
                            r.subject,
                            r.check,
                            f"{fmt(r.value)} {plain(r.unit)}",
                            fmt(r.limit),
                            fmt(r.residual, 3),
                            r.worst,
                        ]
                        for r in balance_rows(bal)
                    ],
                )
            )
            out.append("")
    out += [
        "## Sign-off",
        "",
        _md_table(
            ["role", "name", "signature", "date"],
            [
                ["Commissioning engineer", "", "", ""],
                ["Witness", "", "", ""],
                ["Accepted for the owner", "", "", ""],
            ],
        ),
        "",
        f"> **Caution.** {CAUTION}",
        "",
    ]
    return "\n".join(out)

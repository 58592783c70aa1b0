"""The commissioning report of a dataset: one self-contained HTML file and a Markdown twin.

Everything is inline (CSS, SVG charts), with no scripts and no external references, so the
file can be mailed, archived and printed as it is. Built from the dataset folder alone.
"""

from __future__ import annotations

import html
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol, cast

import numpy as np
import pandas as pd

from .cautions import REPORT_CAUTION as CAUTION
from .dataset.read import Dataset, load_dataset, read_table
from .errors import BenchwalkError
from .progress import Progress

# quantity keys summarized per meter and step: (column title, unit, keys averaged per snapshot)
KEY_READINGS = [
    ("P", "W", ["p.T"]),
    ("Q", "var", ["q.T"]),
    ("V (L-N, mean)", "V", ["v_ln.A", "v_ln.B", "v_ln.C"]),
    ("I (mean)", "A", ["i.A", "i.B", "i.C"]),
]


@dataclass
class ReportData:
    ds: Dataset
    readings: pd.DataFrame  # step, meter, title -> median
    issues: pd.DataFrame  # failed/waived checks, one row per distinct sentence
    balance: pd.DataFrame  # step, check, subject, value, limit, residual (medians over captures)


# The rows the report reads from the dataset tables (``DataFrame.itertuples``), as the dataset
# schema defines their columns; an optional text is None (or NaN) when empty.


class _MeterRow(Protocol):
    id: str
    label: str | None
    map: str
    bus: str
    branch: str | None
    reports: str | None
    ct_ratio: float
    vt_ratio: float
    class_p: str | None
    class_q: str | None
    class_v: str | None
    class_i: str | None
    endpoint: str | None


class _StepRow(Protocol):
    id: str
    order: int
    title: str | None
    kind: str
    state: str | None
    outcome: str | None
    operator: str | None
    settle_s: float
    reason: str | None


class _IssueRow(Protocol):
    """One row of ``ReportData.issues``."""

    step: str | None
    check: str
    subject: str
    message: str | None
    count: int
    value: float
    limit: float
    unit: str | None
    waived: bool
    reason: str


class _BalanceRow(Protocol):
    """One row of ``ReportData.balance``."""

    step: str | None
    check: str
    subject: str
    value: float
    limit: float
    unit: str | None
    worst: str
    residual: float


def _meter_rows(ds: Dataset) -> Iterable[_MeterRow]:
    return cast(Iterable[_MeterRow], ds["meters"].itertuples(index=False))


def _step_rows(steps: pd.DataFrame) -> Iterable[_StepRow]:
    return cast(Iterable[_StepRow], steps.itertuples(index=False))


def _issue_rows(issues: pd.DataFrame) -> Iterable[_IssueRow]:
    return cast(Iterable[_IssueRow], issues.itertuples(index=False))


def _balance_rows(balance: pd.DataFrame) -> Iterable[_BalanceRow]:
    return cast(Iterable[_BalanceRow], balance.itertuples(index=False))


def _fmt(x: float | None, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    ax = abs(x)
    if ax != 0 and (ax >= 1e6 or ax < 1e-3):
        return f"{x:.3e}"
    return f"{x:.{digits}g}" if ax < 1000 else f"{x:,.0f}"


def _s(x: object) -> str:
    return "" if x is None or (isinstance(x, float) and math.isnan(x)) or x is pd.NaT else str(x)


def gather(dataset_dir: Path) -> ReportData:
    """The figures the report shows, computed from the dataset tables."""
    ds = load_dataset(
        dataset_dir,
        tables=["snapshots", "steps", "checks", "meters", "topology", "events", "step_log"],
    )
    keys = sorted({k for _, _, ks in KEY_READINGS for k in ks})
    quantity_phase = [tuple(k.split(".")) for k in keys]
    m = read_table(
        ds.path,
        "measurements",
        columns=["step", "snapshot", "meter", "quantity", "phase", "value", "quality"],
        filters=[
            ("role", "=", "capture"),
            ("quantity", "in", sorted({q for q, _ in quantity_phase})),
        ],
    )
    m = m[m["quality"] == "ok"]
    m = m.assign(key=m["quantity"] + "." + m["phase"])
    frames = []
    for title, _unit, ks in KEY_READINGS:
        sub = m[m["key"].isin(ks)]
        per_snap = sub.groupby(["step", "meter", "snapshot"], sort=False)["value"].mean()
        med = per_snap.groupby(level=["step", "meter"], sort=False).median().rename(title)
        frames.append(med)
    readings = pd.concat(frames, axis=1).reset_index() if frames else pd.DataFrame()

    checks = ds["checks"]
    steps = ds["steps"].set_index("id")
    capture_snaps = set(ds["snapshots"].loc[ds["snapshots"]["role"] == "capture", "snapshot"])
    bad = checks[checks["status"] == "fail"]
    issues = (
        bad.groupby(["step", "check", "subject", "message"], dropna=False, sort=False)
        .agg(
            count=("snapshot", "size"),
            value=("value", "median"),
            limit=("limit", "median"),
            unit=("unit", "first"),
        )
        .reset_index()
    )
    waived, reasons = [], []
    for st in issues["step"]:
        row = steps.loc[st] if st in steps.index else None
        # the runner accepts a failing step only on a gate="allow" step, with a reason: a waiver
        accepted = (
            row is not None and row["state"] == "accepted" and row["outcome"] in ("fail", "warn")
        )
        waived.append(bool(accepted))
        reasons.append(_s(row["reason"]) if row is not None else "")
    issues["waived"] = waived
    issues["reason"] = reasons

    buses = set(ds["topology"].loc[ds["topology"]["element"] == "bus", "id"])
    bal = checks[
        checks["subject"].isin(buses)
        & checks["snapshot"].isin(capture_snaps)
        & checks["limit"].notna()
    ]
    balance = (
        bal.assign(absval=bal["value"].abs())
        .groupby(["step", "check", "subject"], sort=False)
        .agg(
            value=("absval", "median"),
            limit=("limit", "median"),
            unit=("unit", "first"),
            worst=(
                "status",
                lambda s: (
                    "fail" if (s == "fail").any() else ("warn" if (s == "warn").any() else "pass")
                ),
            ),
        )
        .reset_index()
    )
    balance["residual"] = balance["value"] / balance["limit"]
    return ReportData(ds, readings, issues, balance)


# ---------------------------------------------------------------- SVG chart


def balance_svg(rows: pd.DataFrame, width: int = 640) -> str:
    """Horizontal bars of |residual| / limit per bus check; the limit is the line at 1."""
    if rows.empty:
        return ""
    bar_h, gap, left, right, top = 18, 8, 210, 60, 24
    height = top + len(rows) * (bar_h + gap) + 24
    vmax = max(1.5, float(np.nanmax(rows["residual"].to_numpy(float))) * 1.1)
    span = width - left - right
    x = lambda v: left + span * min(v, vmax) / vmax  # noqa: E731
    colour = {"fail": "#b3261e", "warn": "#b26a00", "pass": "#2e6b3a"}
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" role="img" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}" class="chart">',
        "<title>bus balance residuals against their limits</title>",
    ]
    for tick in np.linspace(0, vmax, 4):
        parts.append(
            f'<line x1="{x(tick):.1f}" y1="{top - 6}" x2="{x(tick):.1f}" y2="{height - 18}" class="grid"/>'
        )
        parts.append(f'<text x="{x(tick):.1f}" y="{height - 4}" class="tick">{tick:.2g}</text>')
    for n, r in enumerate(_balance_rows(rows)):
        y = top + n * (bar_h + gap)
        res = float(r.residual)
        w = max(1.0, x(res) - left) if math.isfinite(res) else 0.0
        label = html.escape(f"{r.subject} {r.check}")
        parts.append(f'<text x="{left - 6}" y="{y + bar_h - 5}" class="label">{label}</text>')
        parts.append(
            f'<rect x="{left}" y="{y}" width="{w:.1f}" height="{bar_h}" fill="{colour.get(r.worst, "#555")}"/>'
        )
        parts.append(
            f'<text x="{left + w + 4:.1f}" y="{y + bar_h - 5}" class="val">'
            f"{html.escape(_fmt(r.value))} / {html.escape(_fmt(r.limit))} {html.escape(_s(r.unit))}</text>"
        )
    parts.append(
        f'<line x1="{x(1.0):.1f}" y1="{top - 10}" x2="{x(1.0):.1f}" y2="{height - 18}" class="limit"/>'
    )
    parts.append(f'<text x="{x(1.0) + 3:.1f}" y="{top - 12}" class="tick">limit</text>')
    parts.append("</svg>")
    return "\n".join(parts)


# ---------------------------------------------------------------- HTML

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
    return html.escape(_s(x))


def render_html(rd: ReportData) -> str:
    ds = rd.ds
    meta = ds.meta
    steps = ds["steps"]
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Commissioning report: {_e(meta['bench'])}, session {_e(meta['session'])}</title>",
        f"<style>{CSS}</style></head><body>",
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
    for m in _meter_rows(ds):
        mrows.append(
            [
                _e(m.id),
                _e(m.label),
                _e(m.map),
                _e(f"{m.bus} -> {_s(m.branch) or '(voltage only)'}"),
                _e(m.reports),
                _e(_fmt(m.ct_ratio)),
                _e(_fmt(m.vt_ratio)),
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
    for s in _step_rows(steps):
        srows.append(
            [
                str(s.order),
                _e(s.id),
                _e(s.title),
                _e(s.kind),
                _e(s.state or "not reached"),
                _e(s.outcome),
                _e(s.operator),
                _e(_fmt(s.settle_s, 3)),
                _e(s.reason),
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
        for r in _issue_rows(rd.issues):
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
                    _e(f"{_fmt(r.value)} / {_fmt(r.limit)} {_s(r.unit)}"),
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
    for s in _step_rows(steps):
        sub = rd.readings[rd.readings["step"] == s.id] if not rd.readings.empty else rd.readings
        bal = rd.balance[rd.balance["step"] == s.id]
        if sub.empty and bal.empty:
            continue
        out.append(f"<h3>{s.order}. {_e(s.title)} <small>({_e(s.id)})</small></h3>")
        if not sub.empty:
            rows = [
                [_e(r["meter"])] + [_e(_fmt(r[t])) for t, _, _ in KEY_READINGS]
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


# ---------------------------------------------------------------- Markdown


def _md_table(headers: list[str], rows: Sequence[Sequence[object]]) -> str:
    esc = lambda c: _s(c).replace("|", "\\|").replace("\n", " ")  # noqa: E731
    lines = ["| " + " | ".join(headers) + " |", "|" + "---|" * len(headers)]
    lines += ["| " + " | ".join(esc(c) for c in r) + " |" for r in rows]
    return "\n".join(lines)


def render_markdown(rd: ReportData) -> str:
    ds, meta = rd.ds, rd.ds.meta
    out = [
        f"# Commissioning report: {meta['bench']}",
        "",
        f"> **Caution.** {CAUTION}",
        "",
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
                    f"{m.bus} -> {_s(m.branch) or '(voltage only)'}",
                    m.reports,
                    _fmt(m.ct_ratio),
                    _fmt(m.vt_ratio),
                    f"P {m.class_p}, Q {m.class_q}, V {m.class_v}, I {m.class_i}",
                ]
                for m in _meter_rows(ds)
            ],
        ),
        "",
        "## Sequence",
        "",
        _md_table(
            ["#", "step", "title", "state", "outcome", "operator", "reason"],
            [
                [s.order, s.id, s.title, s.state or "not reached", s.outcome, s.operator, s.reason]
                for s in _step_rows(ds["steps"])
            ],
        ),
        "",
        "## Failed and waived checks",
        "",
    ]
    if rd.issues.empty:
        out.append("No check failed in this session.")
    else:
        out.append(
            _md_table(
                ["step", "check", "subject", "", "finding", "value / limit", "snapshots"],
                [
                    [
                        r.step,
                        r.check,
                        r.subject,
                        ("waived: " + r.reason) if r.waived else "failed",
                        r.message,
                        f"{_fmt(r.value)} / {_fmt(r.limit)} {_s(r.unit)}",
                        r.count,
                    ]
                    for r in _issue_rows(rd.issues)
                ],
            )
        )
    out += [
        "",
        "## Key readings per step",
        "",
        "Median over the step's captures (V and I: mean of the three phases).",
        "",
    ]
    for s in _step_rows(ds["steps"]):
        sub = rd.readings[rd.readings["step"] == s.id] if not rd.readings.empty else rd.readings
        bal = rd.balance[rd.balance["step"] == s.id]
        if sub.empty and bal.empty:
            continue
        out += [f"### {s.order}. {s.title} ({s.id})", ""]
        if not sub.empty:
            out.append(
                _md_table(
                    ["meter"] + [f"{t} [{u}]" for t, u, _ in KEY_READINGS],
                    [
                        [r["meter"]] + [_fmt(r[t]) for t, _, _ in KEY_READINGS]
                        for _, r in sub.iterrows()
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
                            f"{_fmt(r.value)} {_s(r.unit)}",
                            _fmt(r.limit),
                            _fmt(r.residual, 3),
                            r.worst,
                        ]
                        for r in _balance_rows(bal)
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


# ---------------------------------------------------------------- files


def default_report_path(dataset_dir: Path) -> Path:
    d = Path(dataset_dir).resolve()
    return d.parent / f"{d.name}-report.html"


def write_report(
    dataset_dir: Path, out: Path | None = None, *, progress: Progress | None = None
) -> tuple[Path, Path]:
    """Write ``out`` (HTML) and the Markdown beside it; returns both paths."""
    html_path = Path(out) if out is not None else default_report_path(dataset_dir)
    md_path = html_path.with_suffix(".md")
    folder = Path(dataset_dir).resolve()
    if html_path.resolve().is_relative_to(folder):  # the .md beside it would land there too
        raise BenchwalkError(
            f"{html_path}: the report would be written inside the dataset folder {dataset_dir} and "
            "change it; give an --out outside it"
        )
    if progress:
        progress(0, 3)
    rd = gather(dataset_dir)
    if progress:
        progress(1, 3)
    texts = render_html(rd), render_markdown(rd)
    if progress:
        progress(2, 3)
    for path, text in zip((html_path, md_path), texts, strict=True):
        tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp.write_text(text, encoding="utf-8")
            os.replace(tmp, path)
        except OSError as exc:
            tmp.unlink(missing_ok=True)
            raise BenchwalkError(
                f"{path}: cannot write the report ({exc.strerror or exc}); choose another --out"
            ) from exc
    return html_path, md_path

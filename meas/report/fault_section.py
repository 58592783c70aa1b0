"""The staged-fault validation in the session report, when the dataset folder holds one.

``benchwalk fault check RECORD ... --out DATASET/fault`` writes ``summary.json`` there; the
report shows its verdict and measured-against-predicted table, with the staged-fault caution
(``meas.cautions``). The file is read only from inside the dataset folder (no link leaves it),
and a summary that cannot be read is named in the report instead of failing it.
"""

from __future__ import annotations

import html
import json
import math
from pathlib import Path
from typing import Any

from ..cautions import STAGED_FAULT_CAUTION

FAULT_SUMMARY = Path("fault") / "summary.json"


def read_fault_summary(dataset_dir: Path) -> dict[str, Any] | None:
    """The fault summary inside the dataset folder; None when there is none. A summary that is
    unreadable or outside the folder comes back as ``{"problem": "..."}``."""
    folder = Path(dataset_dir).resolve()
    path = Path(dataset_dir) / FAULT_SUMMARY
    if not path.exists():
        return None
    if not path.resolve().is_relative_to(folder):
        return {"problem": f"{path} links outside the dataset folder; not read"}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        return {"problem": f"{path} cannot be read: {exc}"}
    if not isinstance(data, dict) or not isinstance(data.get("comparison"), list):
        return {"problem": f"{path} is not a fault validation summary"}
    return data


def _num(v: object, unit: str = "") -> str:
    if not isinstance(v, int | float) or isinstance(v, bool) or not math.isfinite(v):
        return ""
    return f"{v:.4g} {unit}".strip()


def fault_rows(summary: dict[str, Any]) -> list[list[str]]:
    """quantity, measured ± u, predicted ± u, deviation %, verdict: one row per figure."""
    rows = []
    for f in summary["comparison"]:
        if not isinstance(f, dict):
            continue
        unit = str(f.get("unit", ""))
        rows.append(
            [
                str(f.get("label", f.get("key", ""))),
                f"{_num(f.get('measured'), unit)} ± {_num(f.get('u_measured'))}",
                f"{_num(f.get('predicted'), unit)} ± {_num(f.get('u_predicted'))}",
                _num(f.get("deviation_pct"), "%"),
                str(f.get("verdict", "")),
            ]
        )
    return rows


def fault_heading(summary: dict[str, Any]) -> str:
    pred = summary.get("prediction", {}) if isinstance(summary.get("prediction"), dict) else {}
    rec = summary.get("record", {}) if isinstance(summary.get("record"), dict) else {}
    return (
        f"Staged fault at {pred.get('bus', '?')} ({pred.get('fault', '?')}), record "
        f"{Path(str(rec.get('path', '?'))).name}: {summary.get('verdict', '?')}"
    )


HEAD = ["quantity", "measured", "predicted", "deviation", "verdict"]


def fault_html(summary: dict[str, Any] | None) -> list[str]:
    if summary is None:
        return []
    out = ["<h2>Staged fault validation</h2>"]
    if "problem" in summary:
        return [*out, f"<p>{html.escape(summary['problem'])}</p>"]
    out.append(f'<div class="caution">{html.escape(STAGED_FAULT_CAUTION)}</div>')
    out.append(f"<p><strong>{html.escape(fault_heading(summary))}</strong></p>")
    head = "".join(f"<th>{html.escape(h)}</th>" for h in HEAD)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in row) + "</tr>"
        for row in fault_rows(summary)
    )
    out.append(f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")
    return out


def fault_markdown(summary: dict[str, Any] | None) -> list[str]:
    if summary is None:
        return []
    out = ["## Staged fault validation", ""]
    if "problem" in summary:
        return [*out, summary["problem"], ""]
    out += [f"> {STAGED_FAULT_CAUTION}", "", f"**{fault_heading(summary)}**", ""]
    out.append("| " + " | ".join(HEAD) + " |")
    out.append("|" + "---|" * len(HEAD))
    out += [
        "| " + " | ".join(c.replace("|", "/") for c in row) + " |" for row in fault_rows(summary)
    ]
    return [*out, ""]

"""The session's joint estimate against the network model, as the dataset's ``meter_gains`` and
``coverage`` tables.

One estimate over every captured step of the session (``meas.estimate``: state per step, meter
gains and model parameters shared): switching is what gives a lone meter redundancy, so the
session says more than any one step. The input is the capture snapshots rebuilt from the
dataset's own tables (``meas.dataset.snapshots``), at export and again in ``benchwalk check``,
so both give the same tables.

Never an exception: a profile without model data, an estimate that fails or does not converge
gives empty tables and one line saying why (the export's data is never lost for it).
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import BenchwalkError
from ..estimate import Estimate, Estimator, Finding, MeterGain
from ..model import Profile
from ..snapshot import Snapshot
from .read import Dataset
from .snapshots import captured_steps

Row = dict[str, Any]
NO_MODEL = "the profile has no network model (no branch has a model table)"
_RATIO = ("vt_ratio", "ct_ratio")
# the estimator's sentence for a ratio finding: "M5: voltages 1.100 ± 0.001 of what ..."
_FIGURES = re.compile(r"([0-9]+\.[0-9]+) ± ([0-9]+\.[0-9]+) of what the network implies")


@dataclass(frozen=True)
class SessionEstimate:
    """The two tables' rows and a summary for ``datapackage.json`` (``benchwalk.estimate``)."""

    gains: list[Row] = field(default_factory=list)
    coverage: list[Row] = field(default_factory=list)
    summary: dict[str, Any] = field(default_factory=dict)

    @property
    def reason(self) -> str:
        """Why there are no rows; "" when the estimate was made."""
        return str(self.summary.get("reason", ""))

    def description(self, table: str) -> str:
        """One line for the resource in ``datapackage.json``."""
        if self.reason:
            return f"Empty: {self.reason}."
        s = self.summary
        what = "gains" if table == "meter_gains" else "coverage"
        return (
            f"Meter {what} from one estimate over {s['steps']} captured step configuration(s): "
            f"chi-square {s['chi2']:.1f} for {s['dof']} degrees of freedom "
            f"(99 % limit {s['chi2_limit']:.1f})."
        )


def _none(why: str, steps: int = 0) -> SessionEstimate:
    return SessionEstimate(summary={"estimated": False, "reason": why, "steps": steps})


def _finite(x: float) -> float | None:
    return float(x) if math.isfinite(x) else None


def session_estimate_of(folder: Path) -> SessionEstimate:
    """The estimate of a dataset folder from its own tables and profile files (export, check)."""
    try:
        profile: Profile | None = Dataset(Path(folder), {}, {}).load_profile()
    except BenchwalkError as exc:
        return _none(f"the dataset's profile does not load ({exc})")
    try:
        steps = captured_steps(Path(folder))
    except (BenchwalkError, ValueError, KeyError, TypeError, AttributeError, OverflowError) as exc:
        return _none(f"the captures cannot be rebuilt from the tables ({exc})")
    return estimate_session(profile, steps)


def estimate_session(
    profile: Profile | None, steps: Sequence[tuple[str, Sequence[Snapshot]]]
) -> SessionEstimate:
    """The joint estimate over ``steps`` (step id, its capture snapshots of one configuration)."""
    if profile is None:
        return _none("the dataset's profile no longer loads")
    if not any(b.model is not None for b in profile.branches):
        return _none(NO_MODEL)
    if not any(snaps for _, snaps in steps):
        return _none("no step was captured in this session")
    known = [
        (sid, list(snaps))
        for sid, snaps in steps
        if snaps and all(v in ("open", "closed") for v in snaps[0].switches.values())
    ]
    if not known:
        return _none("no step was captured with every switch state known")
    try:
        e = Estimator(profile).run([snaps for _, snaps in known])
    except Exception as exc:  # noqa: BLE001 - the export must complete whatever the estimate does
        return _none(f"the estimate failed ({type(exc).__name__}: {exc})", len(known))
    if not e.converged:
        return _none(e.why or "the estimate did not converge", len(known))
    k = profile.checks.coverage_k
    return SessionEstimate(_gain_rows(e, k), _coverage_rows(e), _summary(e, [s for s, _ in known]))


def _summary(e: Estimate, step_ids: list[str]) -> dict[str, Any]:
    return {
        "estimated": True,
        "reason": "",
        "steps": e.steps,
        "step_ids": list(dict.fromkeys(step_ids)),
        "iterations": e.iterations,
        "chi2": _finite(e.chi2),
        "dof": e.dof,
        "chi2_limit": _finite(e.chi2_limit),
        "chi2_ok": e.chi2_ok,
        "findings": [
            {"meters": list(f.meters), "cause": f.cause, "sentence": f.sentence} for f in e.findings
        ],
        "unverified": [f"{u.meter} {u.quantity}: {u.reason}" for u in e.unverified],
    }


def _kinds(cause: str) -> tuple[str, ...]:
    """The gain rows a finding's cause is about: a VT ratio or an offset on a voltage reading
    the voltage row; a frozen meter both (every reading stopped); anything else the current."""
    tag = cause.removeprefix("ambiguous:")
    if tag.startswith("frozen"):
        return ("voltage", "current")
    if tag.startswith("vt_ratio") or tag.startswith(("offset:v_ln", "offset:v_ll", "offset:v_ang")):
        return ("voltage",)
    return ("current",)


def _findings_by_row(findings: Sequence[Finding]) -> dict[tuple[str, str], Finding]:
    out: dict[tuple[str, str], Finding] = {}
    for f in findings:
        for m in f.meters:
            for kind in _kinds(f.cause):
                out.setdefault((m, kind), f)
    return out


def _refit_gain(f: Finding) -> tuple[float, float] | None:
    """A ratio finding's gain and u, from the refit with that gain free (its sentence)."""
    if f.ambiguous or not f.cause.startswith(_RATIO):
        return None
    m = _FIGURES.search(f.sentence)
    return (float(m.group(1)), float(m.group(2))) if m else None


def _gain_rows(e: Estimate, k: float) -> list[Row]:
    named = _findings_by_row(e.findings)
    rows = []
    for g in sorted(e.gains, key=lambda g: (g.meter, g.kind)):
        f = named.get((g.meter, g.kind))
        value, u, basis = g.value, g.std, "joint fit"
        refit = _refit_gain(f) if f is not None else None
        if refit is not None:
            value, u = refit
            basis = "refit"
        limit = g.prior_std * math.sqrt(3.0)
        beyond = abs(value - 1.0) > limit + k * u
        cause, message = "", ""
        if f is not None:
            cause, message = f.cause, f.sentence
        elif beyond:
            cause, message = "gain", _beyond_sentence(g, value, u, limit)
        rows.append(
            {
                "meter": g.meter,
                "quantity": g.kind,
                "gain": value,
                "u": u,
                "class_limit": limit,
                "beyond_class": bool(beyond),
                "basis": basis,
                "cause": cause or None,
                "message": message or None,
            }
        )
    return rows


def _beyond_sentence(g: MeterGain, value: float, u: float, limit: float) -> str:
    ratio = "VT" if g.kind == "voltage" else "CT"
    return (
        f"{g.meter}: {g.kind} gain {value:.4f} ± {u:.4f} lies beyond its class limit "
        f"±{100 * limit:.2g} %: check the meter's {ratio} ratio setting and its calibration"
    )


def _coverage_rows(e: Estimate) -> list[Row]:
    return [
        {
            "meter": c.meter,
            "error_kind": c.error_kind,
            "detectable": bool(c.detectable),
            "min_factor": _finite(c.min_factor),
            "why_not": None if c.detectable else _why(c.meter, c.reason),
            "message": c.reason,
        }
        for c in e.coverage
    ]


def _why(meter: str, reason: str) -> str:
    """The reason without the "M5 VT ratio: " the estimator puts before it."""
    head, sep, tail = reason.partition(": ")
    return tail if sep and head.startswith(meter) else reason


def compare_rows(name: str, exported: list[Row], fresh: list[Row], rel: float = 1e-9) -> list[str]:
    """Differences between two versions of one table's rows, one sentence each; [] if equal."""
    if len(exported) != len(fresh):
        return [f"{name}: the dataset has {len(exported)} rows, the re-check gives {len(fresh)}"]
    diffs = []
    for a, b in zip(exported, fresh, strict=True):
        for col, x in a.items():
            y = b.get(col)
            if not _same(x, y, rel):
                key = f"{a.get('meter')} {a.get('quantity') or a.get('error_kind')}"
                diffs.append(f"{name} {key}: {col} {x!r} in the dataset, {y!r} re-checked")
    return diffs


def _same(x: object, y: object, rel: float) -> bool:
    def blank(v: object) -> bool:
        return v is None or (isinstance(v, float) and math.isnan(v))

    if blank(x) or blank(y):
        return blank(x) and blank(y)
    if isinstance(x, float) or isinstance(y, float):
        try:
            return math.isclose(float(x), float(y), rel_tol=rel, abs_tol=0.0)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            return False
    return x == y

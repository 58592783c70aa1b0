"""What the dataset derives from the journal with the bench profile: the standard uncertainty
of every value (the checks' own rule), the profile model's predicted readings, the long
step-configuration table, and which journal rows repeat a poll.

The profile is rebuilt from the text the journal kept (``Profile.sources``), exactly as
``benchwalk check`` rebuilds it from the dataset's ``profile/`` folder.
"""

from __future__ import annotations

import json
import math
import tempfile
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import fields, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..checks.columns import COL, I_ANG, I_PH, P4, PF4, Q4, S4, V_ANG, V_LL, V_LN, F, FloatArray
from ..checks.frame import Frame
from ..checks.layout import Layout
from ..errors import BenchwalkError, ProfileError
from ..journal.read import SnapshotRow, StepTransition
from ..model import Profile
from ..network.readings import ideal_readings
from ..quantities import QUANTITIES, split_key

Row = dict[str, Any]

# the frame columns the checks' uncertainty rule covers (i.N and the energy counters: no rule)
_RULED = np.zeros(len(COL), bool)
for _s in (V_LN, V_LL, I_PH, P4, Q4, S4, PF4, V_ANG, I_ANG):
    _RULED[_s] = True
_RULED[F] = True


def profile_from_texts(files: Sequence[tuple[str, str]]) -> Profile | None:
    """The profile from the journalled files (main first), or None when it no longer loads."""
    if not files:
        return None
    from ..profile import load_profile

    with tempfile.TemporaryDirectory(prefix="benchwalk-profile-") as tmp:
        main = None
        for i, (name, text) in enumerate(files):
            parts = [x for x in Path(name).parts if x not in ("..", "/", "")]
            rel = Path(*parts) if parts and i else Path(Path(name).name or f"file{i}.toml")
            dest = Path(tmp) / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            dest.write_text(text, encoding="utf-8")
            main = main or dest
        try:
            return load_profile(main) if main is not None else None
        except (ProfileError, BenchwalkError):
            return None


class Uncertainty:
    """Standard uncertainty (k = 1) of each reading: ``Frame.from_array``, the checks' rule."""

    def __init__(self, profile: Profile):
        self.layout = Layout.build(profile)
        self.index = {m.id: n for n, m in enumerate(self.layout.meters)}

    def of_rows(
        self, meters: Sequence[str], keys: Sequence[Sequence[str]], values: Sequence[np.ndarray]
    ) -> np.ndarray:
        """u of every value of journal rows (one meter, one snapshot each), concatenated."""
        n = len(meters)
        x = np.full((n, len(COL)), np.nan)
        idx = np.array([self.index.get(m, -1) for m in meters], dtype=np.intp)
        cols = [np.array([COL.get(k, -1) for k in ks], dtype=np.intp) for ks in keys]
        for r, (c, v) in enumerate(zip(cols, values, strict=True)):
            ok = c >= 0
            x[r, c[ok]] = v[ok]
        known = idx >= 0
        u = np.full((n, len(COL)), np.nan)
        if known.any():
            u[known] = _frame_u(self.layout, idx[known], x[known])
        u[:, ~_RULED] = np.nan
        out = [np.where(c >= 0, u[r, np.where(c >= 0, c, 0)], np.nan) for r, c in enumerate(cols)]
        return np.concatenate(out) if out else np.zeros(0)


def _frame_u(lay: Layout, rows: np.ndarray, x: FloatArray) -> FloatArray:
    """Frame.from_array on the layout's rows picked per journal row (one meter each)."""
    c = lay.consts
    picked = replace(c, **{f.name: getattr(c, f.name)[rows] for f in fields(c)})
    view = _LayoutRows(picked, lay.i_n[rows])
    with np.errstate(invalid="ignore", divide="ignore"):  # NaN rows: missing values
        return Frame.from_array(view, x).u  # type: ignore[arg-type]


class _LayoutRows:
    """The two layout attributes ``Frame.from_array`` reads, for a pick of meter rows."""

    def __init__(self, consts: Any, i_n: np.ndarray):
        self.consts = consts
        self.i_n = i_n


def repeated_polls(snapshots: Iterable[SnapshotRow]) -> set[int]:
    """Journal rows that repeat the next row's poll: the step's last ``settling`` row stored
    again as its first ``capture`` (same poll cycle ``seq``, same step). The capture row is kept."""
    rows = list(snapshots)
    out = set()
    for a, b in zip(rows, rows[1:], strict=False):
        if a.seq == b.seq and a.step == b.step and a.role == "settling" and b.role == "capture":
            out.add(a.id)
    return out


def step_switch_rows(prof: Mapping[str, Any], history: list[StepTransition]) -> list[Row]:
    """Long table: per step and switch, the state the step expects (the whole configuration
    the sequence has reached by then) and the state found at the step's last transition."""
    switches = [s["id"] for s in prof.get("switches", [])]
    expected = {s["id"]: s.get("normal") for s in prof.get("switches", [])}
    rows = []
    for n, step in enumerate(prof.get("steps", []), start=1):
        expected.update(step.get("operate") or {})
        expected.update(step.get("expect") or {})
        mine = [h for h in history if h["step"] == step["id"]]
        exp = next((h["expected_switches"] for h in reversed(mine) if h["expected_switches"]), None)
        act = next((h["actual_switches"] for h in reversed(mine) if h["actual_switches"]), None)
        for sw in switches:
            rows.append(
                {
                    "step": step["id"],
                    "step_number": n,
                    "switch": sw,
                    "expected": (exp or expected).get(sw),
                    "actual": (act or {}).get(sw),
                    "operated": sw in (step.get("operate") or {}),
                }
            )
    return rows


def model_rows(profile: Profile, snapshots: Iterable[SnapshotRow], skip: set[int]) -> list[Row]:
    """The profile model's ideal readings for every switch configuration captured, per step.

    Empty when the profile has no model data (a branch without nameplate data) or the load
    flow does not converge: a prediction that cannot be made is left out, never guessed.
    """
    configs: dict[tuple[str | None, str], dict[str, str]] = {}
    for s in snapshots:
        if s.role != "capture" or s.id in skip:
            continue
        states = json.loads(s.switches) if s.switches else {}
        if any(v not in ("open", "closed") for v in states.values()):
            continue  # a switch the PLC did not report: no configuration to predict
        text = ";".join(f"{k}={v}" for k, v in sorted(states.items()))
        configs.setdefault((s.step, text), states)
    rows: list[Row] = []
    for (step, text), states in configs.items():
        try:
            state = ideal_readings(profile, states)
        except (BenchwalkError, ValueError, np.linalg.LinAlgError):
            return []
        for meter, values in state.meters.items():
            for k, v in values.items():
                q, ph = split_key(k)
                rows.append(
                    {
                        "step": step,
                        "switches": text,
                        "meter": meter,
                        "quantity": q,
                        "phase": ph,
                        "value": float(v) if math.isfinite(v) else None,
                        "unit": QUANTITIES[q].unit if q in QUANTITIES else "",
                    }
                )
    return rows

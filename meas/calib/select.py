"""From a dataset to the readings the fit uses: which steps, which rows, their switch states.

Only capture rows of quality ``ok`` count (the step's record, taken after it settled). By
default only steps whose checks passed (outcome ``pass`` or ``warn``, both inside their limits)
are used: the wiring and meter checks run first, so a reading a check flagged never pulls the
model. Readings that carry no information about the model are left out: meters on a dead bus,
and currents and powers of a branch that is switched out or dead.
"""

from __future__ import annotations

from collections.abc import Sequence

import pandas as pd

from ..dataset.read import Dataset
from ..errors import BenchwalkError
from ..model import Profile
from ..network.admittance import build_network
from ..network.elements import element_models
from .observations import FIT_QUANTITIES, Observations, RawRow, StepConfig, pooled_observations

PASSING = ("passed",)  # meas.verdict outcome words: a step whose review had no failing check


def observable(profile: Profile, config: StepConfig) -> dict[str, set[str]]:
    """Meter id -> the quantities it can see in this configuration (empty on a dead bus)."""
    net = build_network(profile, config.switches, element_models(profile))
    out: dict[str, set[str]] = {}
    for m in profile.meters:
        if not net.energized.get(m.bus, False):
            out[m.id] = set()
            continue
        seen = {"v_ln"}
        if m.branch is not None and m.branch not in net.open_branches:
            seen |= {"i", "p", "q"}
        out[m.id] = seen
    return out


def _step_switches(ds: Dataset, step: str, snapshots: Sequence[int]) -> dict[str, str]:
    """The switch states seen in the step's captures (the most frequent per switch)."""
    ss = ds["switch_states"]
    seen = ss[ss["snapshot"].isin(list(snapshots)) & ss["state"].isin(["open", "closed"])]
    out: dict[str, str] = {
        str(sw): str(g["state"].mode().iloc[0]) for sw, g in seen.groupby("switch")
    }
    if not out:  # no switch status in the captures: the states found at the step's transition
        found = ds["step_switches"]
        found = found[(found["step"] == step) & found["actual"].isin(["open", "closed"])]
        out = {str(sw): str(st) for sw, st in zip(found["switch"], found["actual"], strict=True)}
    return out


def choose_steps(ds: Dataset, captured: Sequence[str], which: str | Sequence[str]) -> list[str]:
    """The step ids to fit, in sequence order; ``which`` is "passing", "all" or a list of ids."""
    steps = ds["steps"].sort_values("step_number")
    order = [s for s in steps["id"] if s in set(captured)]
    if isinstance(which, str) and which in ("passing", "all"):
        if which == "all":
            return order
        ok = set(steps.loc[steps["outcome"].isin(PASSING), "id"])
        chosen = [s for s in order if s in ok]
        if not chosen:
            raise BenchwalkError(
                f"{ds.path}: no captured step passed its checks; fix the bench and rerun, or "
                "calibrate from every step with --steps all"
            )
        return chosen
    wanted = [which] if isinstance(which, str) else list(which)
    missing = [s for s in wanted if s not in set(steps["id"])]
    if missing:
        raise BenchwalkError(
            f"{ds.path}: step {missing[0]!r} is not in the dataset; its steps are "
            + ", ".join(steps["id"])
        )
    empty = [s for s in wanted if s not in set(captured)]
    if empty:
        raise BenchwalkError(f"{ds.path}: step {empty[0]!r} has no captured readings to fit")
    return [s for s in order if s in set(wanted)]


def dataset_observations(
    ds: Dataset,
    profile: Profile,
    *,
    steps: str | Sequence[str] = "passing",
    repeatability: float | None = None,
) -> Observations:
    """The readings of a dataset to fit, one row per step, meter, quantity and phase."""
    m = ds["measurements"]
    cap = m[
        (m["role"] == "capture")
        & (m["quality"] == "ok")
        & m["quantity"].isin(FIT_QUANTITIES)
        & m["phase"].isin(["A", "B", "C"])
        & m["value"].notna()
    ]
    if cap.empty:
        raise BenchwalkError(
            f"{ds.path}: the dataset has no captured readings to fit (no capture rows of quality ok)"
        )
    chosen = choose_steps(ds, sorted(set(cap["step"].dropna()) - {""}), steps)
    known = {mt.id for mt in profile.meters}
    sub = cap[cap["step"].isin(chosen)].assign(value=lambda d: pd.to_numeric(d["value"]))
    # one grouping for every step (a groupby per step cost more than the fit itself)
    samples = sub.groupby(["step", "meter", "quantity", "phase"], sort=True)["value"].agg(tuple)
    snapshots = sub.groupby("step")["snapshot"].agg(lambda s: sorted(set(s)))
    by_step: dict[str, list[tuple[str, str, str, tuple[float, ...]]]] = {}
    for key, vals in samples.items():
        st, meter, qty, ph = (str(x) for x in key)  # type: ignore[attr-defined]
        by_step.setdefault(st, []).append((meter, qty, ph, vals))
    configs: list[StepConfig] = []
    raw: list[RawRow] = []
    for k, step in enumerate(chosen):
        snaps = snapshots[step]
        config = StepConfig(step, _step_switches(ds, step, snaps), captures=len(snaps))
        configs.append(config)
        seen = observable(profile, config)
        for meter, qty, ph, vals in by_step.get(step, []):
            if meter not in known or qty not in seen.get(meter, set()):
                continue
            raw.append(RawRow(k, meter, qty, ph, tuple(float(x) for x in vals)))
    if not raw:
        raise BenchwalkError(
            f"{ds.path}: the chosen steps have no reading of a live meter to fit; choose other --steps"
        )
    return pooled_observations(profile, configs, raw, repeatability=repeatability)

"""The switching sequence: ``[[step]]`` tables with their switch states and capture policy."""

from __future__ import annotations

from ..model import (
    GATES,
    STEP_KINDS,
    SWITCH_STATES,
    CapturePolicy,
    SettleCriterion,
    Step,
    StepKind,
    Switch,
    SwitchState,
)
from .tables import Table, at_least, ids, positive, show, suggest, typename

__all__ = ["read_steps"]


def _states(t: Table, key: str, switches: dict[str, Switch]) -> dict[str, SwitchState]:
    st = t.table(key)
    if st is None:
        return {}
    out: dict[str, SwitchState] = {}
    for sw in st.data:
        state = st.choice(sw, SWITCH_STATES, None, what="switch state")
        if sw not in switches:
            st.doc.add(
                st.at(sw),
                f"unknown switch {sw!r}{suggest(sw, switches)} (switches: {', '.join(switches) or 'none defined'})",
            )
        elif state is not None:
            out[sw] = state
    return out


def _capture(t: Table, kind: StepKind | None) -> CapturePolicy | None:
    if not t.has("capture"):
        return None if kind in ("note", "hold") else CapturePolicy()
    v = t.raw("capture")
    if isinstance(v, bool):
        return CapturePolicy() if v else None
    if not isinstance(v, dict):
        t.doc.add(
            t.at("capture"),
            f"expected a table {{ snapshots, interval_s, settle }} or false, got {typename(v)} {show(v)}",
        )
        return None
    c = Table(t.doc, v, t.at("capture"))
    d, ds = CapturePolicy(), SettleCriterion()
    snapshots = c.get("snapshots", "int", d.snapshots, check=at_least(1))
    interval = c.get("interval_s", "number", d.interval_s, check=positive)
    settle = ds
    s = c.table("settle")
    if s is not None:
        settle = SettleCriterion(
            window_s=s.get("window_s", "number", ds.window_s, check=positive),
            rel_spread=s.get("rel_spread", "number", ds.rel_spread, check=positive),
            timeout_s=s.get("timeout_s", "number", ds.timeout_s, check=positive),
        )
        s.finish()
    c.finish()
    return CapturePolicy(snapshots, interval, settle)


def read_steps(tables: list[Table], switches: dict[str, Switch]) -> list[Step]:
    """``[[step]]`` tables (from the profile or its sequence file), against the switches."""
    out = []
    for ident, t in ids(tables, "step").items():
        kind = t.choice("kind", STEP_KINDS, None, required=True, what="step kind")
        expect = _states(t, "expect", switches)
        operate = _states(t, "operate", switches)
        if kind == "remote" and not t.has("operate"):
            t.doc.add(t.path, 'a remote step needs operate = { SWITCH = "open" | "closed" }')
        if kind not in ("remote", None) and t.has("operate"):
            t.doc.add(t.at("operate"), f"only remote steps operate switches; this step is {kind!r}")
        for sw, state in operate.items():
            if switches[sw].operation == "manual":
                t.doc.add(
                    t.at("operate") + (sw,),
                    f'switch {sw!r} is manual (operation = "manual"); it cannot be operated remotely: use a manual step',
                )
            if expect.get(sw, state) != state:
                t.doc.add(
                    t.at("expect") + (sw,),
                    f"expects {sw} {expect[sw]} but the step operates it {state}",
                )
        step = Step(
            id=ident,
            title=t.get("title", "str", "", required=True),
            instruction=t.get("instruction", "str", ""),
            kind=kind or "note",
            expect=expect,
            operate=operate,
            capture=_capture(t, kind),
            gate=t.choice("gate", GATES, "block", what="gate"),
        )
        out.append(step)
    for t in tables:
        t.finish()
    return out

"""The bench-wide sections: ``[bench]`` and its ``[[zone]]`` levels, ``[control]``, ``[poll]``
and ``[checks]``."""

from __future__ import annotations

from typing import Any

from ..model import Bench, CheckSettings, Control, PollSettings, Zone
from .tables import Doc, Table, array_of_tables, at_least, fraction, ids, positive, within

__all__ = [
    "SEED_MAX",
    "read_bench",
    "read_checks",
    "read_control",
    "read_poll",
    "read_sim",
    "seed_problem",
]

SEED_MAX = 2**63 - 1  # a noise seed: a whole number 0..2**63-1 (numpy takes any such integer)
SIM_TRANSIENTS = ("first_order", "damped")


def read_bench(doc: Doc, root: Table) -> Bench:
    """``[bench]`` and its ``[[zone]]`` voltage levels (at least one)."""
    b = root.table("bench", required=True)
    fields: dict[str, Any] = {
        "name": "",
        "frequency_hz": 50.0,
        "power_scale": 1.0,
        "s_base_va": 1.0,
        "description": "",
    }
    if b is not None:
        fields["name"] = b.get("name", "str", "", required=True)
        fields["description"] = b.get("description", "str", "")
        fields["frequency_hz"] = b.get(
            "frequency_hz", "number", 50.0, required=True, check=positive
        )
        fields["s_base_va"] = b.get("s_base_va", "number", 1.0, required=True, check=positive)
        fields["power_scale"] = b.get("power_scale", "number", 1.0, check=positive)
        b.finish()
    zone_tables = array_of_tables(doc, root, "zone")
    if not zone_tables and "zone" not in root.data:
        doc.add(
            ("zone",),
            "missing required [[zone]] table: every bench needs at least one voltage zone",
        )
    zones = []
    for ident, t in ids(zone_tables, "zone").items():
        bench_v = t.get("bench_v_ll", "number", 1.0, required=True, check=positive)
        net_v = t.get("network_v_ll", "number", bench_v, check=positive)
        zones.append(Zone(ident, bench_v, net_v))
    for t in zone_tables:
        t.finish()
    return Bench(zones=tuple(zones), **fields)


def read_control(root: Table) -> Control:
    """``[control]``: writing to devices stays off unless the profile enables it."""
    t = root.table("control")
    if t is None:
        return Control()
    c = Control(
        enabled=t.get("enabled", "bool", False),
        verify_timeout_s=t.get("verify_timeout_s", "number", 3.0, check=positive),
    )
    t.finish()
    return c


def read_poll(root: Table) -> PollSettings:
    """``[poll]``: cycle interval, read coalescing and reconnect backoff."""
    t = root.table("poll")
    if t is None:
        return PollSettings()
    d = PollSettings()
    p = PollSettings(
        interval_s=t.get("interval_s", "number", d.interval_s, check=positive),
        max_gap=t.get("max_gap", "int", d.max_gap, check=at_least(0)),
        backoff_initial_s=t.get("backoff_initial_s", "number", d.backoff_initial_s, check=positive),
        backoff_max_s=t.get("backoff_max_s", "number", d.backoff_max_s, check=positive),
    )
    if p.backoff_max_s < p.backoff_initial_s:
        t.doc.add(
            t.at("backoff_max_s"),
            f"must not be less than backoff_initial_s ({p.backoff_initial_s})",
        )
    t.finish()
    return p


def read_checks(root: Table) -> CheckSettings:
    """``[checks]``: coverage factor, warning fraction, bands and per-check overrides."""
    t = root.table("checks")
    if t is None:
        return CheckSettings()
    d = CheckSettings()
    overrides: dict[str, float] = {}
    o = t.table("overrides")
    if o is not None:
        for k in o.data:
            v = o.get(k, "number", None)
            if v is not None:
                overrides[k] = v
    c = CheckSettings(
        coverage_k=t.get("coverage_k", "number", d.coverage_k, check=positive),
        warn_fraction=t.get("warn_fraction", "number", d.warn_fraction, check=fraction),
        frequency_band_hz=t.get("frequency_band_hz", "number", d.frequency_band_hz, check=positive),
        frozen_cycles=t.get("frozen_cycles", "int", d.frozen_cycles, check=at_least(1)),
        voltage_band=t.get("voltage_band", "number", d.voltage_band, check=fraction),
        unbalance_warn_pct=t.get(
            "unbalance_warn_pct", "number", d.unbalance_warn_pct, check=positive
        ),
        overrides=overrides,
    )
    t.finish()
    return c


def seed_problem(v: object) -> str | None:
    """Why ``v`` is not a noise seed (None when it is one): the profile's and ``--seed``'s rule."""
    if isinstance(v, bool) or not isinstance(v, int):
        return f"a seed is a whole number 0..{SEED_MAX}, not {v!r}"
    if not 0 <= v <= SEED_MAX:
        return f"a seed is a whole number 0..{SEED_MAX}, got {v}"
    return None


def read_sim(root: Table) -> dict[str, Any]:
    """``[sim]``: the simulated bench's seed, transient and update rate, each checked here so
    ``lint`` reports what ``sim`` and ``demo`` would refuse. Other keys are kept as data."""
    t = root.table("sim")
    if t is None:
        return {}
    out = dict(t.data)
    checks: dict[str, tuple[str, Any]] = {
        "seed": ("int", seed_problem),
        "settle_s": ("number", within(0.0, 3600.0)),
        "update_hz": ("number", within(10.0, 1000.0)),
    }
    for key, (kind, check) in checks.items():
        if t.has(key):
            v = t.get(key, kind, None, check=check)
            if v is None:
                out.pop(key, None)
            else:
                out[key] = v
    if t.has("transient"):
        out["transient"] = t.choice("transient", SIM_TRANSIENTS, "first_order", what="transient")
    return out

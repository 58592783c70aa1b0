"""Read a branch's ``model`` table (its nameplate parameters) into ``meas.model`` types.

The parameters are checked here, when the profile is read, so that ``benchwalk lint`` names
every bad value with its line, rather than the simulator refusing to start later. Each kind has
its own keys (``docs/profile-format.md`` lists them). The table is optional: a profile for a
real bench needs none; the simulated bench and the network model need one on every branch.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, get_args

from ..model import (
    BranchParams,
    LineParams,
    LoadBehaviour,
    LoadParams,
    PhaseValues,
    ShuntParams,
    SourceParams,
    TransformerParams,
    VectorGroup,
)
from ..network.parameters import (
    ABSOLUTE_KEYS,
    MAX_ABSOLUTE_POINTS,
    MAX_RELATIVE_PCT,
    tolerance_keys,
)
from .tables import Table, show, typename

VECTOR_GROUPS: tuple[str, ...] = get_args(VectorGroup)
LOAD_BEHAVIOURS: tuple[str, ...] = get_args(LoadBehaviour)
_LUMPED = ("r_ohm", "x_ohm", "b_us", "r0_ohm", "x0_ohm", "b0_us")
_LINE_KEYS = (
    *_LUMPED,
    *(k + "_per_km" for k in _LUMPED),
    "length_km",
    "long_line",
)

Check = Callable[[Any], str | None]


def _min(lo: float) -> Check:
    return lambda v: None if v >= lo else f"must be at least {lo:g}, got {show(v)}"


def _above_zero(v: float) -> str | None:
    return None if v > 0 else f"must be greater than 0, got {show(v)}"


def _number(
    t: Table, key: str, default: float | None = None, *, check: Check | None = None
) -> float | None:
    """A number; required when ``default`` is None (then None comes back with a problem)."""
    value = t.get(key, "number", None, required=default is None, check=check)
    return default if value is None else float(value)


def _phases(t: Table, key: str, default: PhaseValues | None = None) -> PhaseValues | None:
    """A three-phase total or a list of the three phase values A, B, C."""
    if key not in t.data:
        t.seen.add(key)
        if default is None:
            t.doc.add(
                t.path,
                f"missing required key {key!r} (a three-phase total or a list of 3 per-phase "
                "values A, B, C)",
            )
        return default
    value = t.raw(key)
    if isinstance(value, list):
        if len(value) == 3 and all(
            isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
            for v in value
        ):
            return (float(value[0]), float(value[1]), float(value[2]))
    elif isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
        return float(value)
    t.doc.add(
        t.at(key),
        "expected a number or a list of 3 finite numbers (A, B, C), "
        f"got {typename(value)} {show(value)}",
    )
    return None


def _source(t: Table, bus: str | None, ident: Any, ideal: dict[str, str]) -> SourceParams | None:
    v_ll = _number(t, "v_ll", check=_above_zero)
    sc_raw = t.data.get("sc_va")
    if isinstance(sc_raw, float) and sc_raw == math.inf:
        t.seen.add("sc_va")
        sc: float | None = math.inf
        if bus is not None:
            if bus in ideal:
                t.doc.add(
                    t.at("sc_va"),
                    f"bus {bus!r} already has the ideal source {ideal[bus]!r}; "
                    "give one of them a finite sc_va",
                )
            else:
                ideal[bus] = str(ident)
    else:
        sc = _number(t, "sc_va", check=_above_zero)
    x_r = _number(t, "x_r", 1.0 if sc == math.inf else None, check=_min(0.0))
    angle = _number(t, "angle_deg", 0.0)
    if v_ll is None or sc is None or x_r is None or angle is None:
        return None
    return SourceParams(v_ll, sc, x_r, angle)


def _line(t: Table) -> LineParams | None:
    per_km = any(k.endswith("_per_km") or k == "length_km" for k in t.data)
    if per_km and any(k in t.data for k in _LUMPED):
        t.doc.add(
            t.path,
            "mixes lumped (r_ohm, x_ohm, b_us) and per-length (*_per_km, length_km) values; "
            "use one form",
        )
        t.seen.update(_LINE_KEYS)
        return None
    long_line = bool(t.get("long_line", "bool", False))
    length: float | None = None
    sfx = ""
    if per_km:
        length = _number(t, "length_km", check=_above_zero)
        sfx = "_per_km"
    elif long_line:
        t.doc.add(
            t.at("long_line"),
            "needs per-length data (r_ohm_per_km, x_ohm_per_km, b_us_per_km, length_km)",
        )
    r = _number(t, "r_ohm" + sfx, check=_min(0.0))
    x = _number(t, "x_ohm" + sfx)
    b = _number(t, "b_us" + sfx, 0.0, check=_min(0.0))
    r0 = t.get("r0_ohm" + sfx, "number", None, check=_min(0.0))
    x0 = t.get("x0_ohm" + sfx, "number", None)
    b0 = t.get("b0_us" + sfx, "number", None, check=_min(0.0))
    if (("r0_ohm" + sfx) in t.data) != (("x0_ohm" + sfx) in t.data):
        missing = "x0_ohm" if ("r0_ohm" + sfx) in t.data else "r0_ohm"
        t.doc.add(t.at(missing + sfx), "missing; zero-sequence data needs both r0 and x0")
        return None
    if r is None or x is None or b is None or (per_km and length is None):
        return None
    if r == 0 and x == 0:
        t.doc.add(
            t.at("x_ohm" + sfx), "series impedance is zero; a line needs r_ohm or x_ohm above 0"
        )
        return None
    if r0 is not None and x0 is not None and r0 == 0 and x0 == 0:
        t.doc.add(t.at("x0_ohm" + sfx), "zero-sequence impedance is zero")
        return None
    return LineParams(r, x, b, r0, x0, b0, length, long_line)


def _transformer(t: Table) -> TransformerParams | None:
    s = _number(t, "s_va", check=_above_zero)
    v1 = _number(t, "v1_ll", check=_above_zero)
    v2 = _number(t, "v2_ll", check=_above_zero)
    uk = _number(t, "uk_pct", check=_above_zero)
    ur = _number(t, "ur_pct", 0.0, check=_min(0.0))
    tap = _number(t, "tap_pct", 0.0, check=_min(-50.0))
    group = t.choice("vector_group", VECTOR_GROUPS, None, required=True, what="vector group")
    if s is None or v1 is None or v2 is None or uk is None or ur is None or tap is None:
        return None
    if group is None:
        return None
    if ur >= uk:
        t.doc.add(t.at("ur_pct"), f"must be below uk_pct ({uk:g}), got {ur:g}")
        return None
    return TransformerParams(s, v1, v2, uk, group, ur, tap)


def _load(t: Table) -> LoadParams | None:
    p = _phases(t, "p_w")
    q = _phases(t, "q_var", 0.0)
    behaviour = t.choice("model", LOAD_BEHAVIOURS, "pq", what="load model", invalid=None)
    fractions: tuple[float, float, float] | None = None
    if behaviour == "zip":
        z = t.raw("zip")
        good = (
            isinstance(z, list)
            and len(z) == 3
            and all(isinstance(v, int | float) and not isinstance(v, bool) and v >= 0 for v in z)
            and abs(sum(z) - 1.0) <= 1e-6
        )
        if not good:
            t.doc.add(
                t.at("zip"), f"must be 3 fractions [z, i, p] >= 0 that sum to 1, got {show(z)}"
            )
            return None
        fractions = (float(z[0]), float(z[1]), float(z[2]))
    elif t.has("zip"):
        t.seen.add("zip")
        if behaviour is not None:
            t.doc.add(t.at("zip"), f'only used with model = "zip" (model is {behaviour!r})')
    if p is None or q is None or behaviour is None:
        return None
    return LoadParams(p, q, behaviour, fractions)


def _shunt(t: Table) -> ShuntParams | None:
    q = _phases(t, "q_var")
    p = _phases(t, "p_w", 0.0)
    if q is None or p is None:
        return None
    return ShuntParams(q, p)


def _limit_check(hi: float, unit: str) -> Check:
    def check(v: float) -> str | None:
        return None if 0 <= v <= hi else f"a ± limit in {unit} from 0 to {hi:g}, got {show(v)}"

    return check


def _tolerances(m: Table, kind: str, params: BranchParams) -> tuple[tuple[str, float], ...]:
    """The model's ``tolerance_pct`` table: a ± limit per parameter key, checked for sense."""
    t = m.table("tolerance_pct")
    if t is None:
        return ()
    allowed = tolerance_keys(kind, params)
    out = []
    for key in list(t.data):
        if key not in allowed:
            t.seen.add(key)
            t.doc.add(
                t.at(key),
                f"not a {kind} parameter that takes a tolerance; use one of {', '.join(allowed)}",
            )
            continue
        hi = MAX_ABSOLUTE_POINTS if key in ABSOLUTE_KEYS else MAX_RELATIVE_PCT
        unit = "percentage points" if key in ABSOLUTE_KEYS else "percent"
        value = t.get(key, "number", None, check=_limit_check(hi, unit))
        if value is not None:
            out.append((key, float(value)))
    t.finish()
    return tuple(out)


def branch_model(
    t: Table, kind: str | None, from_bus: str | None, ideal: dict[str, str]
) -> tuple[BranchParams | None, tuple[tuple[str, float], ...]]:
    """The branch's ``model`` table as typed parameters (None if absent or with problems) and
    the tolerances it states.

    ``ideal`` collects bus -> branch of the ideal sources read so far, for the one-per-bus rule.
    """
    if t.has("sim"):
        t.seen.add("sim")
        t.doc.add(
            t.at("sim"),
            "the branch's sim table is now called model: rename sim to model "
            "(the profile-level [sim] table keeps its name)",
        )
    raw = t.get("model", "table", None)
    if raw is None or kind is None:
        return None, ()
    m = Table(t.doc, raw, t.at("model"))
    m.seen.add("tolerance_pct")
    before = len(t.doc.problems)
    out: BranchParams | None
    if kind == "source":
        out = _source(m, from_bus, t.data.get("id"), ideal)
    elif kind == "line":
        out = _line(m)
    elif kind == "transformer":
        out = _transformer(m)
    elif kind == "load":
        out = _load(m)
    else:
        out = _shunt(m)
    tolerances = _tolerances(m, kind, out) if out is not None else ()
    m.finish()
    if len(t.doc.problems) != before:
        return None, ()
    return out, tolerances

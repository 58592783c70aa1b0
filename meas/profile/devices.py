"""The devices on the bench: ``[[plc]]`` controllers, ``[[switch]]`` switches and ``[[meter]]``
meters, with their Modbus transports, unit ids and accuracy classes."""

from __future__ import annotations

from ..model import (
    ACCURACY_CLASSES,
    OPERATIONS,
    PARITIES,
    REPORTING,
    STATUS_KINDS,
    SWITCH_STATES,
    AccuracyClass,
    AccuracyClasses,
    Branch,
    Bus,
    Meter,
    Plc,
    RtuTransport,
    StatusPoint,
    Switch,
    TcpTransport,
    Transport,
)
from ..register_map import RegisterMap
from .cover import due_date
from .maps import MAX_ADDRESS
from .tables import (
    Doc,
    Table,
    array_of_tables,
    at_least,
    ids,
    not_empty,
    positive,
    ref,
    show,
    suggest,
    typename,
    within,
)

__all__ = ["read_meters", "read_plcs", "read_switches"]


def _transport(t: Table, what: str) -> Transport | None:
    """Exactly one of ``tcp = {host, port}`` or ``rtu = {device, ...}``."""
    given = [k for k in ("tcp", "rtu") if t.has(k)]
    if len(given) != 1:
        msg = (
            "needs a transport: tcp = { host, port } or rtu = { device, ... }"
            if not given
            else "give only one of tcp and rtu"
        )
        t.doc.add(t.path, f"{what} {msg}")
        t.seen.update(("tcp", "rtu"))
        return None
    sub = t.table(given[0])
    if sub is None:
        return None
    if given[0] == "tcp":
        host = sub.get(
            "host",
            "str",
            None,
            required=True,
            check=not_empty,
        )
        port = sub.get("port", "int", 502, check=within(1, 65535))
        sub.finish()
        return None if host is None else TcpTransport(host, port)
    device = sub.get(
        "device",
        "str",
        None,
        required=True,
        check=not_empty,
    )
    baud = sub.get("baudrate", "int", 9600, check=positive)
    parity = sub.choice("parity", PARITIES, "E", what="parity")
    stopbits = sub.get(
        "stopbits", "int", 1, check=lambda v: None if v in (1, 2) else f"must be 1 or 2, got {v}"
    )
    bytesize = sub.get(
        "bytesize", "int", 8, check=lambda v: None if v in (7, 8) else f"must be 7 or 8, got {v}"
    )
    sub.finish()
    return None if device is None else RtuTransport(device, baud, parity, stopbits, bytesize)


def _unit_id(t: Table, transport: Transport | None) -> int:
    """Modbus unit id, default 1: RTU 1..247 (0 is broadcast), TCP 0..255."""
    rtu = isinstance(transport, RtuTransport)
    lo, hi = (1, 247) if rtu else (0, 255)
    value = t.get("unit_id", "int", None)
    if value is None:
        return 1
    if not lo <= value <= hi:
        t.doc.add(
            t.at("unit_id"),
            f"unit_id {value} is outside {lo}..{hi} for {'an RTU' if rtu else 'a TCP'} device",
        )
    return value


def read_plcs(doc: Doc, root: Table) -> dict[str, Plc]:
    """``[[plc]]`` controllers: transport, unit id, timeout."""
    tables = array_of_tables(doc, root, "plc")
    out = {}
    for ident, t in ids(tables, "plc").items():
        transport = _transport(t, "plc")
        unit_id = _unit_id(t, transport)
        timeout = t.get("timeout_s", "number", 0.5, check=positive)
        out[ident] = Plc(ident, transport or TcpTransport(""), unit_id, timeout)
    for t in tables:
        t.finish()
    return out


def read_switches(
    doc: Doc, root: Table, branches: dict[str, Branch], plcs: dict[str, Plc]
) -> dict[str, Switch]:
    """``[[switch]]`` tables; a remote switch needs its PLC and a command coil of its own."""
    tables = array_of_tables(doc, root, "switch")
    out = {}
    coils: dict[tuple[str, int], str] = {}
    for ident, t in ids(tables, "switch").items():
        branch = ref(t, "branch", branches, "branch")
        operation = t.choice("operation", OPERATIONS, "manual", what="operation", invalid=None)
        normal = t.choice("normal", SWITCH_STATES, "closed", what="switch state")
        plc = ref(t, "plc", plcs, "plc", required=False)
        coil = t.get("command_coil", "int", None, check=within(0, MAX_ADDRESS))
        status = None
        st = t.table("status")
        if st is not None:
            skind = st.choice("kind", STATUS_KINDS, None, required=True, what="status point kind")
            saddr = st.get("address", "int", None, required=True, check=within(0, MAX_ADDRESS))
            st.finish()
            if skind is not None and saddr is not None:
                status = StatusPoint(skind, saddr)
        if operation == "remote":
            missing = [k for k in ("plc", "command_coil") if not t.has(k)]
            if missing:
                t.doc.add(
                    t.path,
                    f'remote switch {ident!r} needs {" and ".join(missing)}; or set operation = "manual"',
                )
        elif t.has("command_coil"):
            t.doc.add(
                t.at("command_coil"),
                'command_coil on a manual switch: the tool never operates it; remove it or set operation = "remote"',
            )
        if t.has("status") and not t.has("plc"):
            t.doc.add(
                t.at("status"), "a status point needs 'plc' to say which controller reports it"
            )
        if plc is not None and coil is not None and operation == "remote":
            other = coils.setdefault((plc, coil), ident)
            if other != ident:
                t.doc.add(
                    t.at("command_coil"), f"coil {coil} of {plc} already commands switch {other!r}"
                )
        operate_time = t.get("operate_time_s", "number", 0.2, check=positive)
        # kept even when incomplete, so steps naming it do not report it as unknown
        out[ident] = Switch(
            ident,
            branch or "",
            t.get("label", "str", ""),
            operation,
            normal,
            plc,
            coil,
            status,
            operate_time,
        )
    for t in tables:
        t.finish()
    return out


def _classes(t: Table) -> AccuracyClasses:
    ct = t.table("classes")
    if ct is None:
        return AccuracyClasses()
    values: dict[str, AccuracyClass] = {}
    for key in ("p", "q", "v", "i"):
        if not ct.has(key):
            continue
        v = ct.raw(key)
        if isinstance(v, int | float) and not isinstance(v, bool):
            v = f"{v:g}"  # classes = { p = 1 } means class "1"
        if not isinstance(v, str):
            ct.doc.add(ct.at(key), f'expected a class like "0.5S", got {typename(v)} {show(v)}')
        elif v not in ACCURACY_CLASSES:
            ct.doc.add(
                ct.at(key),
                f"unknown accuracy class {v!r}{suggest(v, ACCURACY_CLASSES)} (classes: {', '.join(ACCURACY_CLASSES)})",
            )
        else:
            values[key] = v
    ct.finish()
    return AccuracyClasses(**values)


def read_meters(
    doc: Doc,
    root: Table,
    maps: dict[str, RegisterMap],
    buses: dict[str, Bus],
    branches: dict[str, Branch],
    partial: set[str],
) -> list[Meter]:
    """``[[meter]]`` tables: map, bus and branch references, CT/VT side, accuracy classes."""
    tables = array_of_tables(doc, root, "meter")
    out = []
    endpoints: dict[tuple[str, int], str] = {}
    for ident, t in ids(tables, "meter").items():
        transport = _transport(t, "meter")
        unit_id = _unit_id(t, transport)
        map_id = ref(t, "map", maps, "map")
        bus = ref(t, "bus", buses, "bus")
        branch = ref(t, "branch", branches, "branch", required=False)
        if (
            bus is not None
            and branch is not None
            and branch not in partial
            and bus not in branches[branch].buses
        ):
            joins = "-".join(branches[branch].buses)
            t.doc.add(
                t.at("branch"),
                f"branch {branch!r} ({joins}) does not touch the meter's bus {bus!r}",
            )
        reports = t.choice("reports", REPORTING, "primary", what="reporting side")
        ct_ratio = t.get("ct_ratio", "number", 1.0, check=positive)
        vt_ratio = t.get("vt_ratio", "number", 1.0, check=positive)
        if reports == "primary":
            for key in ("ct_ratio", "vt_ratio"):
                if t.has(key) and t.data[key] != 1:
                    t.doc.add(
                        t.at(key),
                        f'{key} is applied only when reports = "secondary"; set reports or remove {key}',
                    )
        meter = Meter(
            id=ident,
            label=t.get("label", "str", ""),
            transport=transport or TcpTransport("127.0.0.1"),
            unit_id=unit_id,
            map_id=map_id or "",
            bus=bus or "",
            branch=branch,
            timeout_s=t.get("timeout_s", "number", 0.5, check=positive),
            retries=t.get("retries", "int", 1, check=at_least(0)),
            reports=reports,
            ct_ratio=ct_ratio,
            vt_ratio=vt_ratio,
            ct_primary_a=t.get("ct_primary_a", "number", None, check=positive),
            classes=_classes(t),
            serial=t.get("serial", "str", ""),
            calibration_due=due_date(t, "calibration_due"),
        )
        if transport is not None:
            other = endpoints.setdefault((transport.endpoint, unit_id), ident)
            if other != ident:
                t.doc.add(
                    t.at("unit_id") if t.has("unit_id") else t.path,
                    f"meter {other!r} already answers at {transport.endpoint} unit_id {unit_id}",
                )
        out.append(meter)
    for t in tables:
        t.finish()
    return out

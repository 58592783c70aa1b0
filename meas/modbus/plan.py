"""Coalesce a meter's register map into the fewest read requests, and bound RTU bus time.

A PLC's switch status points are coalesced the same way into few coil / discrete-input reads
(``status_reads``): at most ``MAX_BIT_READ`` bits per read, bridging at most ``BIT_GAP``.

Each Modbus read costs a round trip (and on RS-485 two silent intervals), so neighbouring
quantities are read together. Rules: one register kind per read (holding = FC3, input = FC4),
at most min(125, map.max_read) registers per read (Modbus Application Protocol Specification
V1.1b3, 6.3/6.4), a value is never split across reads, and a read bridges at most ``max_gap``
unconfigured registers (reading unused registers wastes bus time and some meters answer
exception 2 for them).

Greedy left-to-right coalescing is optimal here: whether specs ``i..j`` fit one read only
gets harder as ``j`` grows or ``i`` shrinks, so extending the current read as far as it goes
never costs a request (``tests/modbus/test_plan.py`` checks this against an exact minimum).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from ..errors import BenchwalkError
from ..model import Meter, Profile, Switch
from ..register_map import RegisterKind, RegisterMap, RegisterSpec

MAX_READ_REGISTERS = 125  # Modbus Application Protocol Specification V1.1b3, FC3/FC4 quantity
MAX_BIT_READ = 2000  # coils / discrete inputs per read, Modbus Application Protocol V1.1b3
BIT_GAP = 16  # unused status bits one read may bridge
FUNCTION_CODE: dict[str, int] = {"holding": 3, "input": 4}


@dataclass(frozen=True)
class ReadRequest:
    """One FC3/FC4 read and the quantities it carries."""

    kind: RegisterKind
    address: int
    count: int
    keys: tuple[str, ...]

    @property
    def function_code(self) -> int:
        return FUNCTION_CODE[self.kind]

    @property
    def end(self) -> int:
        """One past the last register read."""
        return self.address + self.count


@dataclass(frozen=True)
class MeterPlan:
    meter_id: str
    requests: tuple[ReadRequest, ...]
    registers_read: int  # sum of request counts
    registers_wasted: int  # registers read that belong to no configured quantity


def read_limit(regmap: RegisterMap) -> int:
    """Registers one read may carry for this map."""
    return max(1, min(MAX_READ_REGISTERS, regmap.max_read))


def _coalesce(specs: list[RegisterSpec], limit: int, max_gap: int) -> list[list[RegisterSpec]]:
    """Greedy runs over specs sorted by address; see the module docstring for why it is optimal."""
    runs: list[list[RegisterSpec]] = []
    start = end = 0
    for spec in specs:
        if runs:
            gap = spec.address - end
            if gap <= max_gap and max(end, spec.end) - start <= limit:
                runs[-1].append(spec)
                end = max(end, spec.end)
                continue
        runs.append([spec])
        start, end = spec.address, spec.end
    return runs


def _used(specs: list[RegisterSpec]) -> int:
    """Distinct registers occupied by the specs (overlaps counted once)."""
    return len({a for s in specs for a in range(s.address, s.end)})


def plan_map(regmap: RegisterMap, max_gap: int, meter_id: str = "") -> MeterPlan:
    """The fewest reads covering every register of ``regmap`` for this gap setting."""
    limit = read_limit(regmap)
    requests: list[ReadRequest] = []
    wasted = 0
    for kind in ("holding", "input"):
        specs = sorted(
            (s for s in regmap.registers if s.kind == kind), key=lambda s: (s.address, s.end)
        )
        for s in specs:
            if s.count > limit:
                raise BenchwalkError(
                    f"map {regmap.id}: {s.key} ({s.dtype}) needs {s.count} registers but the map "
                    f"allows {limit} per read; raise max_read or change the type"
                )
        for run in _coalesce(specs, limit, max(0, max_gap)):
            address = run[0].address
            count = max(s.end for s in run) - address
            requests.append(ReadRequest(kind, address, count, tuple(s.key for s in run)))
            wasted += count - _used(run)
    return MeterPlan(
        meter_id=meter_id or regmap.id,
        requests=tuple(requests),
        registers_read=sum(r.count for r in requests),
        registers_wasted=wasted,
    )


def plan_meter(meter: Meter, regmap: RegisterMap, max_gap: int) -> MeterPlan:
    """The poll plan of one meter (its map's plan under the meter's id)."""
    return plan_map(regmap, max_gap, meter.id)


def plan_profile(profile: Profile) -> dict[str, MeterPlan]:
    """Plans for every meter of the profile, in profile order."""
    return {
        m.id: plan_meter(m, profile.maps[m.map_id], profile.poll.max_gap) for m in profile.meters
    }


def naive_request_count(regmap: RegisterMap) -> int:
    """Requests when every quantity is read on its own (the benchmark's baseline)."""
    return len(regmap.registers)


# ---------------------------------------------------------------- PLC status bits

BitKind = Literal["coil", "discrete"]


@dataclass(frozen=True)
class StatusRead:
    """One FC1/FC2 read of a PLC and the switch status points it carries."""

    kind: BitKind
    address: int
    count: int
    switches: tuple[tuple[str, int], ...]  # (switch id, bit address)


def status_reads(switches: list[Switch]) -> list[StatusRead]:
    """Coalesce a PLC's status points per kind into few bit reads."""
    reads: list[StatusRead] = []
    kinds: tuple[BitKind, ...] = ("coil", "discrete")
    for kind in kinds:
        pts = sorted(
            (s.status.address, s.id) for s in switches if s.status and s.status.kind == kind
        )
        group: list[tuple[int, str]] = []
        for addr, sid in pts:
            if group and (addr - group[-1][0] > BIT_GAP or addr - group[0][0] >= MAX_BIT_READ):
                reads.append(_bits_read(kind, group))
                group = []
            group.append((addr, sid))
        if group:
            reads.append(_bits_read(kind, group))
    return reads


def _bits_read(kind: BitKind, group: list[tuple[int, str]]) -> StatusRead:
    start = group[0][0]
    return StatusRead(kind, start, group[-1][0] - start + 1, tuple((sid, a) for a, sid in group))


# ---------------------------------------------------------------- RTU timing

RTU_REQUEST_BYTES = 8  # unit id, FC, address (2), count (2), CRC (2)
RTU_REPLY_OVERHEAD = 5  # unit id, FC, byte count, CRC (2); plus 2 bytes per register
FIXED_T35_S = 0.001750  # Modbus over Serial Line V1.02, 2.5.1.1: fixed above 19200 baud


def bits_per_character(parity: str = "E", stopbits: int = 1, bytesize: int = 8) -> int:
    """Start bit + data bits + parity bit (if any) + stop bits: 11 for 8E1/8O1/8N2, 10 for 8N1."""
    return 1 + bytesize + (0 if parity.upper() == "N" else 1) + stopbits


def t35_s(baudrate: int, parity: str = "E", stopbits: int = 1, bytesize: int = 8) -> float:
    """Silent interval between RTU frames: 3.5 characters, fixed 1.750 ms above 19200 baud."""
    if baudrate > 19200:
        return FIXED_T35_S
    return 3.5 * bits_per_character(parity, stopbits, bytesize) / baudrate


def rtu_request_time_s(
    count: int,
    baudrate: int,
    parity: str = "E",
    stopbits: int = 1,
    bytesize: int = 8,
    device_latency_s: float = 0.0,
) -> float:
    """Wire time of one read of ``count`` registers: request + reply + two silent intervals."""
    chars = RTU_REQUEST_BYTES + RTU_REPLY_OVERHEAD + 2 * count
    bpc = bits_per_character(parity, stopbits, bytesize)
    return (
        chars * bpc / baudrate + 2 * t35_s(baudrate, parity, stopbits, bytesize) + device_latency_s
    )


def rtu_cycle_time_s(
    plan: MeterPlan,
    baudrate: int,
    parity: str = "E",
    stopbits: int = 1,
    bytesize: int = 8,
    device_latency_s: float = 0.0,
) -> float:
    """Theoretical bus time of one full poll of a meter's plan (a lower bound on the cycle)."""
    return sum(
        rtu_request_time_s(r.count, baudrate, parity, stopbits, bytesize, device_latency_s)
        for r in plan.requests
    )

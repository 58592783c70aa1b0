"""The simulated bench: PLC, transients, meter noise and faults, served as real Modbus on loopback.

``SimulatedBench(profile)`` serves a ``meas.sim.emulator.BenchEmulator``: one pymodbus server
per TCP endpoint of the profile (meters that share a host:port become unit ids behind one
gateway; a PLC gets its coils and discrete inputs), then an update loop at ``[sim] update_hz``
advances the PLC and the transient, recomputes the load flow only when the switch states
change (cached per state), applies faults and noise, and writes every meter's registers with
``meas.modbus.codec.encode``.
"""

from __future__ import annotations

import asyncio
import contextlib
import dataclasses
import json
import logging
import os
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from pymodbus.server import ModbusTcpServer

from ..errors import BenchwalkError
from ..modbus.codec import encode
from ..model import REGISTER_KINDS, Meter, Plc, Profile, RtuTransport, TcpTransport
from .emulator import BenchEmulator
from .faults import Fault, find
from .readings import IdealReadings
from .server import (
    FC_COIL,
    FC_DISCRETE,
    FC_HOLDING,
    FC_INPUT,
    DelayFront,
    SeenWrite,
    UnitGate,
    meter_device,
    plc_device,
    start_rtu,
    start_tcp,
    stop_server,
)

log = logging.getLogger(__name__)
_FC = {"holding": FC_HOLDING, "input": FC_INPUT}
WRITE_LOG_ENV = "BENCHWALK_SIM_WRITE_LOG"


@dataclass(frozen=True)
class Endpoint:
    """One served unit, as printed by ``benchwalk sim``."""

    kind: str  # "meter" | "plc"
    id: str
    label: str
    host: str
    port: int
    unit_id: int


@dataclass
class _RegisterLayout:
    """Where one meter's values go: per register kind the span start and each spec's offset."""

    blocks: dict[str, tuple[int, int, list]]  # kind -> (start, length, [spec, ...])

    @classmethod
    def of(cls, specs) -> _RegisterLayout:
        blocks: dict[str, tuple[int, int, list]] = {}
        for kind in REGISTER_KINDS:
            mine = [s for s in specs if s.kind == kind]
            if mine:
                lo = min(s.address for s in mine)
                blocks[kind] = (lo, max(s.end for s in mine) - lo, mine)
        return cls(blocks)

    def words(self, values: Mapping[str, float]) -> list[tuple[int, int, list[int]]]:
        out = []
        for kind, (lo, n, specs) in self.blocks.items():
            regs = [0] * n
            for s in specs:
                regs[s.address - lo : s.end - lo] = encode(s, values[s.key])
            out.append((_FC[kind], lo, regs))
        return out


class SimulatedBench(BenchEmulator):
    """The whole simulated bench in this event loop. Bind is 127.0.0.1 unless ``host`` says else.

    ``port_map``: None = the profile's ports; ``"free"`` = ports from the OS; or a mapping
    profile port -> port to use. ``seed``, ``noise``, ``readings`` and ``clock`` are
    ``BenchEmulator``'s. ``self_updating=False`` starts no update loop: the caller calls
    ``update(t)`` before each poll (a session's ``CycleClock``, ``meas.sim.clock``).

    Every write request any simulated server receives is kept in ``writes_seen`` and, when
    ``write_log`` (default ``$BENCHWALK_SIM_WRITE_LOG``) names a file, appended to it as one
    JSON line: an audit of what the tool sent to the plant, readable after the process ends.
    """

    def __init__(
        self,
        profile: Profile,
        faults: Sequence[Fault] = (),
        *,
        host: str = "127.0.0.1",
        port_map: str | Mapping[int, int] | None = None,
        seed: int | None = None,
        noise: bool = True,
        readings: Callable[[Profile, dict[str, str]], IdealReadings] | None = None,
        clock: Callable[[], float] = time.monotonic,
        write_log: str | os.PathLike | None = None,
        self_updating: bool = True,
    ):
        super().__init__(profile, faults, seed=seed, noise=noise, readings=readings, clock=clock)
        log_to = write_log if write_log is not None else os.environ.get(WRITE_LOG_ENV) or None
        self.write_log: Path | None = Path(log_to) if log_to else None
        self.writes_seen: list[SeenWrite] = []
        self.host = host
        self.self_updating = self_updating
        self.port_map = port_map
        self._gates: dict[str, UnitGate] = {m.id: UnitGate() for m in profile.meters}
        self._gates.update({p.id: UnitGate() for p in profile.plcs})
        self._layouts = {
            m.id: _RegisterLayout.of(profile.maps[m.map_id].registers) for m in profile.meters
        }
        self._targets: dict[str, list] = {
            m.id: [] for m in profile.meters
        }  # meter -> [(server, unit)]
        self._plc_targets: list[tuple[ModbusTcpServer, int]] = []
        self._servers: list = []
        self._fronts: list[DelayFront] = []
        self._task: asyncio.Task | None = None
        self.endpoints: list[Endpoint] = []
        self.bound: Profile | None = None  # the profile as served, once started
        self._front_meters: dict[int, set[str]] = {}
        self.update_times: list[float] = []  # clock() of each update, for rate measurements
        self._apply_gates()

    # ------------------------------------------------------------------ faults

    def _admit(self, faults: Sequence[Fault]) -> None:
        if self._servers:
            fronted = {m for f in self._fronts for m in self._front_meters.get(id(f), ())}
            for f in faults:
                if f.kind == "slow" and f.meter not in fronted:
                    raise BenchwalkError(
                        f"fault {f.text!r}: slow faults must be given when the bench starts"
                    )

    def _faults_changed(self) -> None:
        self._apply_gates()

    def _apply_gates(self) -> None:
        for mid, gate in self._gates.items():
            gate.offline = find(mid, self._faults, "offline") is not None
            exc = find(mid, self._faults, "exception")
            gate.exception_code = int(exc.arg) if exc else None  # type: ignore[arg-type]
            slow = find(mid, self._faults, "slow")
            gate.delay_s = float(slow.arg) if slow else 0.0  # type: ignore[arg-type]

    def _on_write(self, seen: SeenWrite) -> None:
        self.writes_seen.append(seen)
        if self.write_log is not None:
            try:
                with open(self.write_log, "a", encoding="utf-8") as f:
                    f.write(json.dumps(dataclasses.asdict(seen)) + "\n")
            except OSError as exc:  # the audit file must never stop the bench
                log.warning("cannot append to the write log %s: %s", self.write_log, exc)

    def requests_seen(self, meter_id: str) -> int:
        """Client requests that reached this meter (the bench's own updates not counted)."""
        return self._gates[meter_id].requests

    # ------------------------------------------------------------------ register updates

    async def update(self, t: float | None = None) -> None:
        """One update: compute and write every meter's registers and the PLC's status points."""
        t = self.clock() if t is None else t
        values = self.compute(t)
        for mid, vals in values.items():
            if vals is self.values.get(mid):
                continue  # frozen: the registers keep what they hold
            blocks = self._layouts[mid].words(vals)
            for server, unit in self._targets[mid]:
                for fc, lo, regs in blocks:
                    await server.async_setValues(unit, fc, lo, regs)
        self.values = values
        await self._write_plc()
        self.update_times.append(t)
        if len(self.update_times) > 10000:
            del self.update_times[:5000]

    async def _write_plc(self) -> None:
        if not self._plc_targets:
            return
        discretes = [(a, v) for kind, a, v in self.plc.status_bits() if kind == "discrete"]
        coils = [(a, v) for kind, a, v in self.plc.status_bits() if kind == "coil"]
        for server, unit in self._plc_targets:
            if discretes:
                bits = [False] * (max(a for a, _ in discretes) + 1)
                for a, v in discretes:
                    bits[a] = v
                await server.async_setValues(unit, FC_DISCRETE, 0, bits)
            for a, v in coils:
                await server.async_setValues(unit, FC_COIL, a, [v])

    # ------------------------------------------------------------------ servers

    def _port_for(self, port: int) -> int:
        if self.port_map == "free":
            return 0
        if isinstance(self.port_map, Mapping):
            return int(self.port_map.get(port, port))
        return port

    def _plc_device(self, plc: Plc):
        switches = [s for s in self.profile.switches if s.plc == plc.id]
        coils = [s.command_coil for s in switches if s.command_coil is not None]
        coils += [s.status.address for s in switches if s.status and s.status.kind == "coil"]
        discretes = [s.status.address for s in switches if s.status and s.status.kind == "discrete"]

        def on_write(address: int, value: bool) -> bool:
            ok = self.plc.command_coil(address, value, self.clock())
            if ok:
                log.info("PLC %s: coil %d <- %s", plc.id, address, value)
            return ok

        return plc_device(plc.unit_id, coils, discretes, on_write, self._gates[plc.id])

    async def start(self) -> Profile:
        """Serve every TCP endpoint and start updating; the profile as actually bound."""
        groups: dict[tuple[str, int], list[Meter | Plc]] = {}
        devices_all: tuple[Meter | Plc, ...] = (*self.profile.meters, *self.profile.plcs)
        for item in devices_all:
            if isinstance(item.transport, TcpTransport):
                groups.setdefault((item.transport.host, item.transport.port), []).append(item)
        bound: dict[tuple[str, int], int] = {}
        try:
            for (host, port), items in groups.items():
                units = [i.unit_id for i in items]
                if len(set(units)) != len(units):
                    raise BenchwalkError(
                        f"{self.profile.path}: two devices on {host}:{port} share a unit id"
                    )
                devices = [
                    meter_device(i.unit_id, self.profile.maps[i.map_id], self._gates[i.id])
                    if isinstance(i, Meter)
                    else self._plc_device(i)
                    for i in items
                ]
                slow = [
                    i.id for i in items if isinstance(i, Meter) and find(i.id, self._faults, "slow")
                ]
                want = self._port_for(port)
                if slow:  # pymodbus behind, a delaying front on the public port
                    server, back_port = await start_tcp(
                        devices, "127.0.0.1", 0, on_write=self._on_write
                    )
                    front = DelayFront(
                        self.host,
                        want,
                        ("127.0.0.1", back_port),
                        {i.unit_id: self._gates[i.id] for i in items if isinstance(i, Meter)},
                    )
                    self._servers.append(server)
                    bound[(host, port)] = await front.start()
                    self._fronts.append(front)
                    self._front_meters[id(front)] = {i.id for i in items if isinstance(i, Meter)}
                else:
                    server, bound[(host, port)] = await start_tcp(
                        devices, self.host, want, on_write=self._on_write
                    )
                    self._servers.append(server)
                for i in items:
                    if isinstance(i, Meter):
                        self._targets[i.id].append((server, i.unit_id))
                    else:
                        self._plc_targets.append((server, i.unit_id))
                    self.endpoints.append(
                        Endpoint(
                            "meter" if isinstance(i, Meter) else "plc",
                            i.id,
                            getattr(i, "label", ""),
                            self.host,
                            bound[(host, port)],
                            i.unit_id,
                        )
                    )
            await self.update()
        except BaseException:
            await self.stop()
            raise
        if self.self_updating:
            self._task = asyncio.create_task(self._run(), name="benchwalk-sim-update")
        self.bound = self.bound_profile(bound)
        return self.bound

    def bound_profile(self, bound: Mapping[tuple[str, int], int]) -> Profile:
        """A copy of the profile whose TCP transports point at the bound host and ports."""

        def moved(item):
            tr = item.transport
            if isinstance(tr, TcpTransport) and (tr.host, tr.port) in bound:
                return dataclasses.replace(
                    item, transport=TcpTransport(self.host, bound[(tr.host, tr.port)])
                )
            return item

        return dataclasses.replace(
            self.profile,
            meters=tuple(moved(m) for m in self.profile.meters),
            plcs=tuple(moved(p) for p in self.profile.plcs),
        )

    def listening(self) -> list[tuple[str, int]]:
        """(host, port) of every listening TCP socket the bench holds, for tests and logs."""
        out = []
        for holder in [
            *(getattr(s, "transport", None) for s in self._servers),
            *(f.server for f in self._fronts),
        ]:
            for sock in getattr(holder, "sockets", None) or ():
                out.append(tuple(sock.getsockname()[:2]))
        return out

    async def serve_rtu(
        self,
        device: str,
        meter_ids: Iterable[str] | None = None,
        *,
        baudrate: int = 19200,
        parity: str = "N",
        stopbits: int = 1,
        bytesize: int = 8,
    ):
        """Also serve meters as RTU slaves on a serial path (a pty in tests).

        ``meter_ids`` default: the profile's RTU meters whose device is ``device``.
        """
        if meter_ids is None:
            meter_ids = [
                m.id
                for m in self.profile.meters
                if isinstance(m.transport, RtuTransport) and m.transport.device == device
            ]
        meters = [self.profile.meter(mid) for mid in meter_ids]
        if not meters:
            raise BenchwalkError(f"no meter of {self.profile.path} to serve on {device}")
        devices = [
            meter_device(m.unit_id, self.profile.maps[m.map_id], self._gates[m.id]) for m in meters
        ]
        server = await start_rtu(
            devices, device, baudrate, parity, stopbits, bytesize, on_write=self._on_write
        )
        self._servers.append(server)
        for m in meters:
            self._targets[m.id].append((server, m.unit_id))
        await self.update()
        return server

    async def _run(self) -> None:
        period = 1.0 / self.update_hz
        next_t = time.monotonic()
        while True:
            try:
                await self.update()
            except asyncio.CancelledError:
                raise
            except Exception:  # keep serving; a bad cycle must not stop the bench
                log.exception("simulated bench update failed")
            next_t += period
            delay = next_t - time.monotonic()
            if delay < 0:
                next_t = time.monotonic()
                delay = 0
            await asyncio.sleep(delay)

    async def stop(self) -> None:
        if self._task:
            self._task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._task
            self._task = None
        for front in self._fronts:
            await front.stop()
        for server in self._servers:
            await stop_server(server)
        self._fronts.clear()
        self._servers.clear()

    async def __aenter__(self) -> SimulatedBench:
        await self.start()
        return self

    async def __aexit__(self, *exc) -> None:
        await self.stop()

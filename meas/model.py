"""The bench profile as plain frozen dataclasses.

``meas.profile`` reads and validates the TOML into these; everything downstream (poll plan,
poller, simulator, checks, runner, dataset) consumes only these types, never raw TOML.
Electrical values are on the bench side, in SI units (V, A, W, var, VA, ohm, S). A meter
model's register map is ``meas.register_map``'s.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal, get_args

# The register map (its types and register vocabularies) is ``meas.register_map``'s. A map is
# part of the profile, so ``RegisterMap`` and ``REGISTER_KINDS`` are importable from here too.
from .register_map import REGISTER_KINDS as REGISTER_KINDS
from .register_map import RegisterMap as RegisterMap

# Each vocabulary is written once, as a Literal for the type checker; the tuple beside it (same
# order) is what the loader offers in its messages and what other modules iterate over.
Parity = Literal["N", "E", "O"]
PARITIES: tuple[Parity, ...] = get_args(Parity)
Reporting = Literal["primary", "secondary"]  # which side of the CT/VT a meter reports
REPORTING: tuple[Reporting, ...] = get_args(Reporting)
# Class designations as printed on meters (IEC 62053-21/-22/-24 style, common practice).
AccuracyClass = Literal["0.1S", "0.2S", "0.5S", "1S", "0.1", "0.2", "0.5", "1", "2", "3"]
ACCURACY_CLASSES: tuple[AccuracyClass, ...] = get_args(AccuracyClass)
BranchKind = Literal["source", "line", "transformer", "load", "shunt"]
BRANCH_KINDS: tuple[BranchKind, ...] = get_args(BranchKind)
TWO_ENDED: tuple[BranchKind, ...] = ("line", "transformer")  # the kinds with a to_bus
StatusKind = Literal["coil", "discrete"]
STATUS_KINDS: tuple[StatusKind, ...] = get_args(StatusKind)
Operation = Literal["manual", "remote"]
OPERATIONS: tuple[Operation, ...] = get_args(Operation)
SwitchState = Literal["open", "closed"]
SWITCH_STATES: tuple[SwitchState, ...] = get_args(SwitchState)
StepKind = Literal["manual", "remote", "capture", "hold", "note"]
STEP_KINDS: tuple[StepKind, ...] = get_args(StepKind)
Gate = Literal["block", "allow"]  # allow = may accept failing checks with a reason
GATES: tuple[Gate, ...] = get_args(Gate)
VectorGroup = Literal["Yy0", "Yyn0", "YNyn0", "Dyn11", "Dyn1"]
LoadBehaviour = Literal["pq", "z", "i", "zip"]
# A per-phase quantity as the profile gives it: a three-phase total (split equally over the
# phases) or the three phase values A, B, C.
PhaseValues = float | tuple[float, float, float]


@dataclass(frozen=True)
class Zone:
    """A voltage level of the bench and the network voltage it stands for."""

    id: str
    bench_v_ll: float
    network_v_ll: float

    @property
    def voltage_scale(self) -> float:
        return self.network_v_ll / self.bench_v_ll


@dataclass(frozen=True)
class Bench:
    name: str
    frequency_hz: float
    power_scale: float  # network W per bench W
    s_base_va: float  # three-phase per-unit power base on the bench side
    zones: tuple[Zone, ...]
    description: str = ""

    def zone(self, zone_id: str) -> Zone:
        for z in self.zones:
            if z.id == zone_id:
                return z
        raise KeyError(zone_id)


@dataclass(frozen=True)
class TcpTransport:
    host: str
    port: int = 502

    @property
    def endpoint(self) -> str:
        return f"tcp://{self.host}:{self.port}"


@dataclass(frozen=True)
class RtuTransport:
    device: str
    baudrate: int = 9600
    parity: Parity = "E"
    stopbits: int = 1
    bytesize: int = 8

    @property
    def endpoint(self) -> str:
        return f"rtu://{self.device}"


Transport = TcpTransport | RtuTransport


@dataclass(frozen=True)
class AccuracyClasses:
    """Class designations as printed on the meter: "0.2S", "0.5S", "1", "2", "3"."""

    p: AccuracyClass = "1"
    q: AccuracyClass = "2"
    v: AccuracyClass = "0.5"
    i: AccuracyClass = "0.5"


@dataclass(frozen=True)
class Meter:
    id: str
    label: str
    transport: Transport
    unit_id: int
    map_id: str
    bus: str  # where the voltage is measured
    branch: str | None  # the branch whose current it measures; None = voltage-only meter
    # Sign convention: positive P/Q = power flowing from ``bus`` into ``branch``.
    timeout_s: float = 0.5
    retries: int = 1
    reports: Reporting = "primary"
    ct_ratio: float = 1.0  # primary A per secondary A, applied when reports == "secondary"
    vt_ratio: float = 1.0  # primary V per secondary V, applied when reports == "secondary"
    ct_primary_a: float | None = None  # rated primary current, for out-of-range checks
    classes: AccuracyClasses = field(default_factory=AccuracyClasses)
    serial: str = ""  # instrument serial number (report cover, optional)
    calibration_due: str = ""  # ISO date the calibration falls due (report cover, optional)


@dataclass(frozen=True)
class TestEquipment:
    """An instrument used besides the meters (tester, clamp meter), for the report's cover."""

    name: str
    serial: str = ""
    calibration_due: str = ""  # ISO date


@dataclass(frozen=True)
class ReportCover:
    """Optional ``[report]`` facts a handover needs; shown on the report when present."""

    project: str = ""
    site: str = ""
    document: str = ""  # document number
    revision: str = ""
    test_equipment: tuple[TestEquipment, ...] = ()


@dataclass(frozen=True)
class Bus:
    id: str
    zone: str
    label: str = ""


# ---------------------------------------------------------------- nameplate models of branches
# What a branch's ``model`` table says, validated by the profile loader; ``meas.network`` turns
# these into phase-frame matrices. Bench-side SI units throughout.


@dataclass(frozen=True)
class SourceParams:
    """A three-phase EMF behind its short-circuit impedance; ``sc_va = inf`` holds the bus voltage."""

    v_ll: float  # EMF, line-to-line rms, V
    sc_va: float  # three-phase short-circuit power at the bus, VA (inf = ideal source)
    x_r: float = 1.0  # X/R of the source impedance (required unless the source is ideal)
    angle_deg: float = 0.0  # angle of the phase-A EMF


@dataclass(frozen=True)
class LineParams:
    """A pi section. Lumped when ``length_km`` is None, else every value is per km.

    Zero-sequence series values default to the positive-sequence ones (no mutual coupling),
    ``b0_us`` to ``b_us``; ``long_line`` applies the exact hyperbolic correction (per-km only).
    """

    r_ohm: float
    x_ohm: float
    b_us: float = 0.0  # total shunt susceptance (both halves of the pi), microsiemens
    r0_ohm: float | None = None
    x0_ohm: float | None = None
    b0_us: float | None = None
    length_km: float | None = None
    long_line: bool = False


@dataclass(frozen=True)
class TransformerParams:
    """A two-winding transformer; winding 1 is at ``from_bus``, the tap on winding 1."""

    s_va: float  # rated power
    v1_ll: float  # rated line-to-line voltage, winding 1
    v2_ll: float  # rated line-to-line voltage, winding 2
    uk_pct: float  # short-circuit voltage, percent
    vector_group: VectorGroup
    ur_pct: float = 0.0  # resistive part of uk, percent (copper losses)
    tap_pct: float = 0.0  # ratio change on winding 1, percent


@dataclass(frozen=True)
class LoadParams:
    """Power consumed at the zone's nominal voltage, wye-grounded, with a voltage dependence."""

    p_w: PhaseValues
    q_var: PhaseValues = 0.0
    behaviour: LoadBehaviour = "pq"  # the profile's key ``model``
    zip: tuple[float, float, float] | None = None  # fractions z, i, p when behaviour is "zip"


@dataclass(frozen=True)
class ShuntParams:
    """A constant admittance to ground; positive ``q_var`` absorbs (a reactor)."""

    q_var: PhaseValues  # at the zone's nominal voltage
    p_w: PhaseValues = 0.0


BranchParams = SourceParams | LineParams | TransformerParams | LoadParams | ShuntParams


@dataclass(frozen=True)
class Branch:
    """A source, line, transformer, load or shunt. One-ended kinds have ``to_bus`` None.

    ``model`` is the branch's nameplate model (the profile's ``model`` table) matching its
    kind, or None when the profile gives none (a real bench needs none; a simulated one does).
    """

    id: str
    kind: BranchKind
    from_bus: str
    to_bus: str | None = None
    label: str = ""
    model: BranchParams | None = field(default=None, compare=False, hash=False)
    # (key, ± limit) pairs the profile states in the model's ``tolerance_pct``; the defaults
    # and their meaning are in ``meas.network.parameters``
    tolerance_pct: tuple[tuple[str, float], ...] = field(default=(), compare=False, hash=False)

    @property
    def buses(self) -> tuple[str, ...]:
        return (self.from_bus,) if self.to_bus is None else (self.from_bus, self.to_bus)


@dataclass(frozen=True)
class StatusPoint:
    kind: StatusKind
    address: int


@dataclass(frozen=True)
class Plc:
    """The controller that operates and reports switches."""

    id: str
    transport: Transport
    unit_id: int = 1
    timeout_s: float = 0.5


@dataclass(frozen=True)
class Switch:
    id: str
    branch: str
    label: str = ""
    operation: Operation = "manual"
    normal: SwitchState = "closed"
    plc: str | None = None
    command_coil: int | None = None  # write True = close, False = open; only if remote
    status: StatusPoint | None = None  # True = closed
    operate_time_s: float = 0.2  # simulated bench: mechanism time before status follows


@dataclass(frozen=True)
class Control:
    """Whether the tool may ever write to a device. Off unless the profile says otherwise."""

    enabled: bool = False
    verify_timeout_s: float = 3.0


@dataclass(frozen=True)
class PollSettings:
    interval_s: float = 0.2
    max_gap: int = 8  # unused registers a read may bridge to save a request
    backoff_initial_s: float = 0.5
    backoff_max_s: float = 10.0


@dataclass(frozen=True)
class CheckSettings:
    coverage_k: float = 2.0  # expansion factor, GUM 6.2.1: k = 2 ~ 95 %
    warn_fraction: float = 0.7  # warn when |residual| exceeds this fraction of the limit
    frequency_band_hz: float = 0.5
    frozen_cycles: int = 10
    voltage_band: float = 0.15  # fraction of zone nominal
    unbalance_warn_pct: float = 2.0
    overrides: dict[str, float] = field(default_factory=dict, compare=False, hash=False)


@dataclass(frozen=True)
class SettleCriterion:
    window_s: float = 2.0
    rel_spread: float = 0.005  # max (max-min)/|mean| of P, Q, V in the window
    timeout_s: float = 30.0


@dataclass(frozen=True)
class CapturePolicy:
    snapshots: int = 5
    interval_s: float = 0.5
    settle: SettleCriterion = field(default_factory=SettleCriterion)


@dataclass(frozen=True)
class Step:
    id: str
    title: str
    instruction: str
    kind: StepKind
    expect: dict[str, SwitchState] = field(default_factory=dict, compare=False, hash=False)
    operate: dict[str, SwitchState] = field(default_factory=dict, compare=False, hash=False)
    capture: CapturePolicy | None = field(default_factory=CapturePolicy)
    gate: Gate = "block"


@dataclass(frozen=True)
class SourceFile:
    """One file of the profile exactly as the loader read and validated it; the journal keeps
    this text, so a session records what was checked, not what is on disk later."""

    name: str  # relative to the profile's folder, POSIX separators; the main file first
    text: str


@dataclass(frozen=True)
class Profile:
    path: str
    sha256: str  # of the profile file and any companion files, in order
    bench: Bench
    maps: dict[str, RegisterMap]
    meters: tuple[Meter, ...]
    buses: tuple[Bus, ...]
    branches: tuple[Branch, ...]
    switches: tuple[Switch, ...]
    plcs: tuple[Plc, ...] = ()
    control: Control = field(default_factory=Control)
    poll: PollSettings = field(default_factory=PollSettings)
    checks: CheckSettings = field(default_factory=CheckSettings)
    steps: tuple[Step, ...] = ()
    sim: dict[str, Any] = field(default_factory=dict, compare=False, hash=False)
    sources: tuple[SourceFile, ...] = field(default=(), compare=False, hash=False)
    cover: ReportCover = field(default_factory=ReportCover)

    def meter(self, meter_id: str) -> Meter:
        for m in self.meters:
            if m.id == meter_id:
                return m
        raise KeyError(meter_id)

    def meter_map(self, meter_id: str) -> RegisterMap:
        return self.maps[self.meter(meter_id).map_id]

    def branch(self, branch_id: str) -> Branch:
        for b in self.branches:
            if b.id == branch_id:
                return b
        raise KeyError(branch_id)

    def bus(self, bus_id: str) -> Bus:
        for b in self.buses:
            if b.id == bus_id:
                return b
        raise KeyError(bus_id)

    def switch(self, switch_id: str) -> Switch:
        for s in self.switches:
            if s.id == switch_id:
                return s
        raise KeyError(switch_id)

    def zone_of_bus(self, bus_id: str) -> Zone:
        return self.bench.zone(self.bus(bus_id).zone)

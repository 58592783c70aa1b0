"""One meter or PLC behind an endpoint: its state, and one poll of it -> a ``Draft``.

A unit has its own backoff, so a dead meter behind a gateway costs its neighbours one
timeout, not one per cycle, and never drops their link. A unit that stops answering skips the
rest of its reads for the cycle; a unit already in backoff is probed with one attempt (no
retries), after its healthy neighbours, and waits only a few times the link's slowest learned
healthy read (floor 50 ms; TCP only; one probe per ``full_probe_every_s`` waits the full
timeout, so a slow unit is never locked out while its neighbours lose at most one cycle in
that long).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime

from ..modbus.decode import RequestDecoder
from ..modbus.link import (
    Backoff,
    BadReply,
    DeviceException,
    Disconnected,
    EndpointLink,
    NoAnswer,
)
from ..modbus.plan import MeterPlan, StatusRead
from ..model import Meter
from ..snapshot import CommState, MeterBlock, Quality

GATEWAY_NO_TARGET = {0x0A, 0x0B}  # gateway path unavailable / target failed to respond
RECONNECT_AFTER_SILENT = 3  # consecutive unanswered reads on an open link before we redial
ANSWER_DECAY = 0.9  # per cycle: how fast a slow answer stops widening the deadline
PROBE_RTT_FACTOR = 4  # probe of a unit in backoff: this many x the link's slowest healthy read,
PROBE_FLOOR_S = 0.05  # but never shorter than this, nor longer than the unit's own timeout

StopRetrying = Callable[[], bool]  # asked before a retry: true when no one can use the answer


@dataclass(frozen=True)
class MeterStatus:
    state: CommState
    last_good_utc: datetime | None
    error_count: int
    last_error: str
    exception_code: int | None
    latency_s: float = math.nan


@dataclass
class Unit:
    """A meter (with its plan) or a PLC (with its status reads), with backoff and status."""

    id: str
    unit_id: int
    timeout_s: float
    retries: int
    backoff: Backoff
    meter: Meter | None = None
    plan: MeterPlan | None = None
    decoders: list[RequestDecoder] = field(default_factory=list)  # by request index
    keys: tuple[str, ...] = ()  # every key the plan reads, in request order
    nan_values: dict[str, float] = field(default_factory=dict)  # template: every key NaN
    status_reads: list[StatusRead] = field(default_factory=list)
    state: CommState = CommState.OFFLINE
    last_good_utc: datetime | None = None
    error_count: int = 0
    last_error: str = "not polled yet"
    exception_code: int | None = None
    latency_s: float = math.nan
    answer_s: float = 0.0  # decaying max of the time a full answered poll takes
    full_probe_every_s: float = 10.0  # at most one full-timeout probe this often (backoff_max_s)
    last_full_probe: float = 0.0  # monotonic: when the last attempt waited the full timeout

    @property
    def requests(self) -> int:
        return len(self.plan.requests) if self.plan is not None else len(self.status_reads)

    def status(self) -> MeterStatus:
        return MeterStatus(
            self.state,
            self.last_good_utc,
            self.error_count,
            self.last_error,
            self.exception_code,
            self.latency_s,
        )

    def deliver(self, d: Draft, time_utc: datetime) -> MeterBlock:
        """Record a draft as this cycle's result for the unit (status, counters) -> block."""
        self.state = d.state
        self.latency_s = d.latency_s
        if d.state in (CommState.OK, CommState.DEGRADED):
            self.last_good_utc = time_utc
        if d.state in (CommState.FAILING, CommState.OFFLINE):
            self.error_count += 1
        else:
            self.error_count = 0
        self.last_error = d.error
        self.exception_code = d.exception_code
        return MeterBlock(
            meter=self.id,
            values=d.values,
            quality=d.quality,
            state=d.state,
            exception_code=d.exception_code,
            error=d.error,
            last_good_utc=self.last_good_utc,
            error_count=self.error_count,
            latency_s=d.latency_s,
        )


@dataclass
class Draft:
    """What one unit's poll produced, before it is delivered into its cycle's Snapshot."""

    values: dict[str, float]
    quality: dict[str, Quality]
    state: CommState
    error: str
    exception_code: int | None
    latency_s: float
    bits: dict[tuple[str, str], bool] = field(default_factory=dict)  # PLC status points


def unanswered(unit: Unit, quality: Quality, error: str) -> Draft:
    """Every value of the unit NaN with one quality (the poll failed or is still pending)."""
    return Draft(
        dict(unit.nan_values),
        dict.fromkeys(unit.keys, quality),
        CommState.FAILING,
        error,
        None,
        math.nan,
    )


def note_silence(link: EndpointLink, unit: Unit, neighbours: Sequence[Unit]) -> None:
    """After a read went unanswered: redial the link once no unit on it answers any more."""
    if link.silent_reads >= RECONNECT_AFTER_SILENT * (unit.retries + 1) and all(
        u.backoff.failures > 0 or u is unit for u in neighbours
    ):
        link.drop(f"no unit on {link.endpoint} answers; reconnecting")


def probe_limit(
    link: EndpointLink, unit: Unit, neighbours: Sequence[Unit], now: float
) -> float | None:
    """Timeout of a probe of a unit in backoff (None: its full timeout).

    A probe holds the shared client, so it waits only a few times the slowest learned
    healthy read on the link (the unit's own remembered one included). Not on a serial
    line, where a reply after a timeout is taken for the next request's; and one probe per
    ``unit.full_probe_every_s`` waits the full timeout so a slow unit can always return.
    """
    if unit.backoff.failures <= 1:
        unit.last_full_probe = now  # the attempt that failed first waited the full timeout
    if link.is_serial or now - unit.last_full_probe >= unit.full_probe_every_s:
        unit.last_full_probe = now
        return None
    slowest = max(
        (u.answer_s / u.requests for u in neighbours if u.answer_s > 0 and u.requests),
        default=0.0,
    )
    if slowest <= 0:
        return None  # nothing learned on this link: no basis for a shorter wait
    limit = max(PROBE_FLOOR_S, PROBE_RTT_FACTOR * slowest)
    return limit if limit < unit.timeout_s else None


async def poll_meter(
    link: EndpointLink,
    unit: Unit,
    neighbours: Sequence[Unit],
    stop_retrying: StopRetrying | None = None,
) -> Draft:
    """Every read of a meter's plan, decoded; gives up on the unit at its first silence."""
    assert unit.plan is not None and unit.meter is not None
    values = dict(unit.nan_values)
    quality: dict[str, Quality] = {}
    errors: list[str] = []
    exception_code: int | None = None
    retried = no_answer = False
    now = time.monotonic()
    if not link.connected or not unit.backoff.ready(now):
        reason = (
            (link.last_error or f"{link.endpoint} not connected")
            if not link.connected
            else (
                f"unit {unit.unit_id} silent; next try in {max(0.0, unit.backoff.next_try - now):.1f} s"
            )
        )
        return Draft(
            values,
            dict.fromkeys(unit.keys, Quality.OFFLINE),
            CommState.OFFLINE,
            reason,
            None,
            math.nan,
        )
    probing = unit.backoff.failures > 0
    attempts = 1 if probing else unit.retries + 1  # a probe: is it back?
    limit_s = probe_limit(link, unit, neighbours, now) if probing else None
    n_ok = 0
    rest: Quality | None = None  # the quality the unread rest got when we gave up on the unit
    t0 = now
    requests = unit.plan.requests
    for i, req in enumerate(requests):
        try:
            words, r = await link.read(
                req.kind,
                req.address,
                req.count,
                unit.unit_id,
                unit.timeout_s,
                attempts,
                limit_s,
                stop_retrying,
            )
            retried |= r
            n_ok += unit.decoders[i].decode(words, values, quality, errors)
            continue
        except NoAnswer as exc:
            note_silence(link, unit, neighbours)
            no_answer = True
            errors.append(str(exc))
            rest = Quality.TIMEOUT
        except DeviceException as exc:
            exception_code = exception_code or exc.code
            errors.append(
                f"exception {exc.code:#04x} reading FC{req.function_code} {req.address}+{req.count}"
            )
            quality.update(dict.fromkeys(req.keys, Quality.EXCEPTION))
            if exc.code not in GATEWAY_NO_TARGET:
                continue
            no_answer = True  # the gateway could not reach the unit: same as silence
            rest = Quality.TIMEOUT
        except BadReply as exc:
            errors.append(str(exc))
            quality.update(dict.fromkeys(req.keys, Quality.DECODE))
            if not exc.costly:
                continue
            no_answer = True
            rest = Quality.DECODE
        except Disconnected as exc:
            errors.append(str(exc))
            no_answer |= exc.during
            rest = Quality.OFFLINE
        for rq in requests[i:]:  # give up on this unit for the cycle
            for k in rq.keys:
                quality.setdefault(k, rest)
        break
    latency = time.monotonic() - t0
    if n_ok:
        unit.backoff.reset()
    elif no_answer:
        unit.backoff.fail(time.monotonic())
    if rest not in (Quality.TIMEOUT, Quality.OFFLINE) and not retried:  # every request answered
        unit.answer_s = max(latency, unit.answer_s * ANSWER_DECAY)
    if n_ok == len(unit.keys):
        state = CommState.DEGRADED if retried else CommState.OK
    elif n_ok:
        state = CommState.DEGRADED
    elif all(q is Quality.OFFLINE for q in quality.values()):
        state = CommState.OFFLINE
    else:
        state = CommState.FAILING
    return Draft(values, quality, state, "; ".join(errors), exception_code, latency)


async def poll_plc(
    link: EndpointLink,
    unit: Unit,
    neighbours: Sequence[Unit],
    stop_retrying: StopRetrying | None = None,
) -> Draft:
    """Every status read of a PLC -> the switch bits it answered for."""
    out: dict[tuple[str, str], bool] = {}
    now = time.monotonic()
    if not link.connected or not unit.backoff.ready(now):
        return Draft({}, {}, CommState.OFFLINE, link.last_error or "in backoff", None, math.nan)
    errors: list[str] = []
    no_answer = False
    exception_code: int | None = None
    attempts = 1 if unit.backoff.failures else unit.retries + 1
    limit_s = probe_limit(link, unit, neighbours, now) if unit.backoff.failures else None
    t0 = time.monotonic()
    for rd in unit.status_reads:
        try:
            bits, _ = await link.read(
                rd.kind,
                rd.address,
                rd.count,
                unit.unit_id,
                unit.timeout_s,
                attempts,
                limit_s,
                stop_retrying,
            )
        except NoAnswer as exc:
            note_silence(link, unit, neighbours)
            errors.append(str(exc))
            no_answer = True
            break
        except DeviceException as exc:
            errors.append(f"exception {exc.code:#04x} reading {rd.kind} {rd.address}+{rd.count}")
            exception_code = exc.code
            continue
        except (BadReply, Disconnected) as exc:
            errors.append(str(exc))
            if (isinstance(exc, BadReply) and exc.costly) or (
                isinstance(exc, Disconnected) and exc.during
            ):
                no_answer = True
                break
            continue
        for sid, addr in rd.switches:
            out[(unit.id, sid)] = bool(bits[addr - rd.address])
    latency = time.monotonic() - t0
    if out:
        unit.backoff.reset()
        if not errors:
            unit.answer_s = max(latency, unit.answer_s * ANSWER_DECAY)
        state = CommState.DEGRADED if errors else CommState.OK
    else:
        if no_answer:
            unit.backoff.fail(time.monotonic())
        state = CommState.FAILING
    return Draft({}, {}, state, "; ".join(errors), exception_code, latency, bits=out)

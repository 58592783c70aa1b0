"""quality.comm: whether each meter answered this cycle with every value ok.

The passing results are built once per profile and shared (results are immutable); only a
meter with a fault gets a result of its own, its status and cause from the block's comm state
and value qualities.
"""

from __future__ import annotations

from ..model import Meter
from ..results import CheckResult
from ..snapshot import CommState, MeterBlock, Quality, Snapshot
from .base import FAIL, PASS, WARN, Buckets, result
from .frame import Frame
from .layout import Layout

STATUS_CODE = {s: c for c, s in enumerate(("fail", "warn", "pass", "n/a"))}


class CommPlan:
    """Per-profile parts of the communication check."""

    def __init__(self, lay: Layout):
        self.lay = lay
        self.comm_pass = [
            result("quality.comm", m.id, PASS, message="all values ok") for m in lay.meters
        ]

    def run(self, snap: Snapshot, fr: Frame, bk: Buckets) -> None:
        ok_state = CommState.OK
        blocks = snap.meters
        qual_ok = fr.qual_ok
        for mi, m in enumerate(self.lay.meters):
            b = blocks.get(m.id)
            if (
                b is not None
                and b.state is ok_state
                and (
                    qual_ok[mi] if qual_ok is not None else set(b.quality.values()) <= {Quality.OK}
                )
            ):
                bk[PASS].append(self.comm_pass[mi])
                continue
            r = _comm_fault(m, b)
            bk[STATUS_CODE[r.status]].append(r)


def _comm_fault(m: Meter, b: MeterBlock | None) -> CheckResult:
    check = "quality.comm"
    if b is None:
        return result(
            check,
            m.id,
            FAIL,
            message=f"{m.id} is missing from this snapshot: it is not being polled",
            cause="missing",
        )
    bad = sorted(k for k, q in b.quality.items() if q is not Quality.OK)
    if b.state in (CommState.FAILING, CommState.OFFLINE) or (bad and len(bad) == len(b.quality)):
        why = b.error or f"communication {b.state}"
        msg = (
            f"no good data from {m.id}: {why}; check its wiring, address (unit {m.unit_id}) and "
            f"{m.transport.endpoint}; captured data is kept"
        )
        return result(check, m.id, FAIL, float(b.error_count), message=msg, cause=f"comm:{b.state}")
    if bad:
        stale = [k for k in bad if b.quality[k] is Quality.STALE]
        kinds = sorted({str(b.quality[k]) for k in bad})
        msg = (
            f"{len(bad)} value(s) not ok ({', '.join(kinds)}): {', '.join(bad[:6])}{' ...' if len(bad) > 6 else ''}; "
            + (
                "values repeated from an earlier cycle"
                if stale
                else "check those registers in the map"
            )
        )
        return result(
            check, m.id, WARN, float(len(bad)), message=msg, cause="stale" if stale else "partial"
        )
    if b.state is CommState.DEGRADED:
        return result(
            check,
            m.id,
            WARN,
            message=f"{m.id} answered after a retry: {b.error or 'degraded'}",
            cause="degraded",
        )
    return result(check, m.id, PASS, message="all values ok")


__all__ = ["CommPlan"]

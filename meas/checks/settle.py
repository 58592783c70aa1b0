"""Is the bench steady enough to capture? A rolling window over P, Q and V of every meter.

Fed one Snapshot at a time. Valid when, over the last ``window_s`` seconds, every meter's
P total, Q total and mean L-N voltage has a relative spread (max - min) / reference within
``rel_spread``. The reference of V is its mean; that of P and Q is the meter's mean apparent
power, because their errors (and their noise: an angle error turns P into Q) scale with S,
not with P or Q alone. A floor (5 % of the meter's rated power, 10 % of nominal voltage) keeps
a dead or idle branch from blocking the gate. The model
is the steady-state notion of IEC 61000-4-30 (values within a threshold of their recent
mean; REFERENCES.md 5) [M].
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from ..model import Profile, SettleCriterion
from ..snapshot import Snapshot
from .columns import FloatArray, nanmean


@dataclass(frozen=True)
class SettleState:
    settled: bool  # a capture taken now is valid
    window_full: bool  # the window spans window_s already
    spread: float  # worst relative spread in the window
    worst: str  # "<meter>:<quantity>" with the worst spread
    elapsed_s: float  # since the start time
    settle_time_s: (
        float  # start of the steady window, seconds after the start time; NaN until steady
    )
    timed_out: bool  # not steady within timeout_s


class SettleDetector:
    """Rolling-window steady-state gate; ``restart(t)`` after each switching operation."""

    def __init__(self, profile: Profile, criterion: SettleCriterion | None = None):
        self.c = criterion or SettleCriterion()
        self.ids = [m.id for m in profile.meters]
        n = len(self.ids)
        self.floor = np.empty((n, 3))
        for i, m in enumerate(profile.meters):
            v_n = profile.zone_of_bus(m.bus).bench_v_ll / math.sqrt(3.0)
            i_n = m.ct_primary_a or profile.bench.s_base_va / (3 * v_n)
            self.floor[i] = (0.05 * 3 * v_n * i_n, 0.05 * 3 * v_n * i_n, 0.1 * v_n)
        self._win: deque[tuple[float, FloatArray]] = deque()
        self.t0 = math.nan
        self.settled_at = math.nan

    def restart(self, t_start: float) -> None:
        self._win.clear()
        self.t0 = t_start
        self.settled_at = math.nan

    def _row(self, snap: Snapshot) -> FloatArray:
        out = np.full((len(self.ids), 4), np.nan)
        for i, mid in enumerate(self.ids):
            b = snap.meters.get(mid)
            if b is None:
                continue
            v = [b.get(f"v_ln.{p}") for p in "ABC"]
            v = [x for x in v if not math.isnan(x)]
            p, q = b.get("p.T"), b.get("q.T")
            s = b.get("s.T")
            out[i] = (
                p,
                q,
                sum(v) / len(v) if v else math.nan,
                math.hypot(p, q) if math.isnan(s) else s,
            )
        return out

    def feed(self, snap: Snapshot) -> SettleState:
        t = snap.t_mono
        if math.isnan(self.t0):
            self.t0 = t
        self._win.append((t, self._row(snap)))
        while len(self._win) > 1 and t - self._win[1][0] >= self.c.window_s:
            self._win.popleft()
        span = t - self._win[0][0]
        full = span >= self.c.window_s - 1e-9
        full4 = np.stack([r for _, r in self._win])  # (t, n, 4): P, Q, V, S
        x = full4[:, :, :3]
        with np.errstate(invalid="ignore", all="ignore"):
            ok = ~np.isnan(x)
            hi = np.where(ok, x, -np.inf).max(axis=0)
            lo = np.where(ok, x, np.inf).min(axis=0)
            cnt = ok.sum(axis=0)
            mean = np.where(ok, x, 0.0).sum(axis=0) / np.maximum(cnt, 1)
            s_abs = np.abs(nanmean(full4[:, :, 3].T))
            ref = np.abs(mean)
            ref[:, 0] = np.nan_to_num(s_abs)
            ref[:, 1] = np.nan_to_num(s_abs)
            rel = np.where(cnt > 0, (hi - lo) / np.fmax(ref, self.floor), 0.0)
        j = int(np.argmax(rel))
        worst = f"{self.ids[j // 3]}:{('p.T', 'q.T', 'v_ln')[j % 3]}" if rel.size else ""
        spread = float(rel.flat[j]) if rel.size else 0.0
        elapsed = t - self.t0
        steady = full and spread <= self.c.rel_spread
        if steady and math.isnan(self.settled_at):
            self.settled_at = self._win[0][0] - self.t0  # steady ever since the window began
        if not steady and not math.isnan(self.settled_at):
            self.settled_at = (
                math.nan
            )  # lost it again: settling time is the last entry into steady state
        return SettleState(
            steady,
            full,
            spread,
            worst,
            elapsed,
            self.settled_at,
            (not steady) and elapsed > self.c.timeout_s,
        )

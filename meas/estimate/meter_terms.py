"""A capture's meters as the estimator's meter terms: which readings enter the fit, and how.

What a meter contributes depends on the switch state (does its branch carry a modelled
current, is it the one free injection at its bus) and on the pattern of its readings (which
are ok, whether it has an angle reference, enough voltage for angles, enough current for a
current's angle). Consecutive captures of one switch state share all of that, so it is worked
out once per pattern (a ``Template``); each capture then only gathers its values and
uncertainties into the template's places.

Rules: a meter without a branch has no current readings; a meter on a branch without model
data is checked through Kirchhoff only when it is its bus's one free injection; angles only
where the meter has an angle reference and at least a tenth of nominal voltage, a current's
angle only above ``ANGLE_MIN_FRAC`` of rated current.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..model import Meter, Profile
from .core import ANGLE_SLOTS, Current, MeterTerm
from .weights import ANGLE_MIN_FRAC, SLOT_INDEX, SLOT_KEYS, CaptureMeans, ReadingStd

_V_A = SLOT_INDEX["v_ln.A"]
_I_ABC = [SLOT_INDEX[f"i.{ph}"] for ph in "ABC"]
_CURRENT_QUANTITIES = ("i", "p", "q", "i_ang")
_V_ANG_REF = [SLOT_INDEX["v_ang.B"], SLOT_INDEX["v_ang.C"]]
MEMO_MAX = 256


@dataclass(frozen=True)
class Wiring:
    """How a meter's current enters the fit in one switch state (``Builder``'s topology)."""

    current: Current  # empty: its branch carries nothing here
    drop: str  # why its current readings are left out ("" = they are not)
    v_nodes: NDArray[np.int64]


@dataclass(frozen=True)
class Template:
    """One switch state and reading pattern: the meter terms but for values and uncertainties."""

    meters: tuple[Meter, ...]
    wiring: tuple[Wiring, ...]
    gains: tuple[tuple[int, int], ...]
    slots: tuple[NDArray[np.int64], ...]
    keys: tuple[tuple[str, ...], ...]
    rows: NDArray[np.int64]  # each reading's row in the capture's means ...
    cols: NDArray[np.int64]  # ... and its slot
    angle: NDArray[np.bool_]  # readings that are angles (degrees in, radians to the fit)
    split: NDArray[np.int64]  # where each meter's readings end
    at: NDArray[np.int64]  # each meter's row in the capture's means
    dropped: tuple[tuple[str, str], ...]  # (meter, why) whose current readings are left out


def select(m: Meter, ok: NDArray[np.bool_], gate: Sequence[bool], drop: bool) -> list[int]:
    """The slots of a meter's readings that enter the fit (the module docstring's rules).

    ``ok``: which slots have a reading; ``gate``: enough voltage for angles, and per phase
    enough current for its angle; ``drop``: its current readings are left out.
    """
    has_ang_ref = bool(ok[_V_ANG_REF].any())
    out = []
    for si, key in enumerate(SLOT_KEYS):
        if not ok[si]:
            continue
        q = key.split(".")[0]
        if (m.branch is None or drop) and q in _CURRENT_QUANTITIES:
            continue
        if key in ANGLE_SLOTS:
            if (q == "v_ang" and not has_ang_ref) or not gate[0]:
                continue
            if q == "i_ang" and not gate[1 + "ABC".index(key[-1])]:
                continue
        out.append(si)
    return out


class MeterTerms:
    """Meter terms of captures, with templates memoized per switch state and pattern."""

    def __init__(self, profile: Profile, rated: Callable[[Meter], tuple[float, float]]):
        self.profile = profile
        self.stds = ReadingStd(profile)
        self._rated = rated
        self._templates: dict[tuple[object, ...], Template] = {}
        self._limits: dict[tuple[str, ...], NDArray[np.float64]] = {}

    def _gates(self, means: CaptureMeans) -> NDArray[np.bool_]:
        """(meters, 4): voltage enough for angles, and each phase's current for its angle."""
        ids = tuple(means.rows)
        lim = self._limits.get(ids)
        if lim is None:
            by_id = {m.id: m for m in self.profile.meters}
            rated = np.array([self._rated(by_id[i]) for i in ids], float).reshape(-1, 2)
            lim = np.column_stack([0.1 * rated[:, 0], *([ANGLE_MIN_FRAC * rated[:, 1]] * 3)])
            self._limits[ids] = lim
        vals = means.mean[:, [_V_A, *_I_ABC]]
        return vals >= lim  # NaN (no reading) compares False

    def template(
        self,
        state: object,
        means: CaptureMeans,
        wiring: Callable[[Meter], Wiring | None],
        gains: Callable[[Meter], tuple[int, int]],
    ) -> Template:
        """The template of this capture's pattern in the switch state ``state`` (a hashable
        name for it); ``wiring`` says how a meter's current enters (None: not live)."""
        ok = ~np.isnan(means.mean)
        gate = self._gates(means)
        memo = (state, tuple(means.rows), ok.tobytes(), gate.tobytes())
        hit = self._templates.get(memo)
        if hit is not None:
            return hit
        meters, wires, gain, slots, keys, dropped = [], [], [], [], [], []
        for m in self.profile.meters:
            j = means.rows.get(m.id)
            if j is None or not ok[j].any():
                continue
            w = wiring(m)
            if w is None:
                continue
            sl = select(m, ok[j], gate[j].tolist(), bool(w.drop))
            if w.drop:
                dropped.append((m.id, w.drop))
            if not sl:
                continue
            meters.append(m)
            wires.append(w)
            gain.append(gains(m))
            slots.append(np.array(sl, np.int64))
            keys.append(tuple(SLOT_KEYS[s] for s in sl))
        at = np.array([means.rows[m.id] for m in meters], np.int64)
        counts = [len(s) for s in slots]
        cols = np.concatenate(slots) if slots else np.zeros(0, np.int64)
        out = Template(
            tuple(meters),
            tuple(wires),
            tuple(gain),
            tuple(slots),
            tuple(keys),
            np.repeat(at, counts),
            cols,
            np.array([SLOT_KEYS[c] in ANGLE_SLOTS for c in cols.tolist()], bool),
            np.cumsum(counts)[:-1],
            at,
            tuple(dropped),
        )
        for arr in out.slots:
            arr.flags.writeable = False  # shared by every capture of this pattern
        while len(self._templates) >= MEMO_MAX:  # oldest first: memory stays flat
            self._templates.pop(next(iter(self._templates)))
        self._templates[memo] = out
        return out

    def terms(self, t: Template, means: CaptureMeans) -> tuple[MeterTerm, ...]:
        """The capture's meter terms: the template filled with its values and uncertainties."""
        if not t.meters:
            return ()
        z = means.mean[t.rows, t.cols]
        z[t.angle] = np.radians(z[t.angle])
        sig = self.stds.from_slots(
            [(m, k) for m, k in zip(t.meters, t.keys, strict=True)],
            means.mean[t.at],
            means.rep[t.rows, t.cols],
        )
        zs = np.split(z, t.split)
        return tuple(
            MeterTerm(m.id, w.v_nodes, w.current, gv, gi, sl, zi, si)
            for m, w, (gv, gi), sl, zi, si in zip(
                t.meters, t.wiring, t.gains, t.slots, zs, sig, strict=True
            )
        )

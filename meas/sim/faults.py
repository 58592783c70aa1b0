"""Faults the simulated bench can inject, written ``KIND:METER[:ARG]`` on the command line.

Wiring faults (``ct-reversed``, ``phases-swapped``, ``vt-ratio``, ``ct-ratio``) change what a
meter measures; ``noisy`` scales its noise; ``frozen`` stops its values; ``offset`` adds a
constant to one reading (``offset:M3:i.B:+2.5``, the one kind with two arguments); communication faults
(``offline``, ``slow``, ``exception``) change how its Modbus server answers. The user-facing
description of every kind is in ``docs/faults.md``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from ..errors import BenchwalkError
from ..model import Profile
from ..quantities import is_valid_key

PHASE_INDEX = {"A": 0, "B": 1, "C": 2}

# kind -> (argument shape for the help text, argument required?)
KINDS: dict[str, tuple[str, bool]] = {
    "ct-reversed": ("PHASE (A, B or C)", True),
    "phases-swapped": ("PAIR (A-B, B-C or C-A)", True),
    "vt-ratio": ("FACTOR (e.g. 1.1)", True),
    "ct-ratio": ("FACTOR (e.g. 0.8)", True),
    "frozen": ("", False),
    "offline": ("", False),
    "slow": ("SECONDS (e.g. 1.5)", True),
    "exception": ("CODE (1-11, e.g. 4)", True),
    "noisy": ("FACTOR (e.g. 5)", True),
    "offset": ("KEY:AMOUNT (e.g. i.B:+2.5, in the reading's primary unit)", True),
}
WIRING = frozenset({"ct-reversed", "phases-swapped", "vt-ratio", "ct-ratio"})
# Modbus Application Protocol V1.1b3, 7: the exception codes a device may answer with
EXCEPTION_CODES = frozenset({1, 2, 3, 4, 5, 6, 8, 10, 11})


@dataclass(frozen=True)
class Fault:
    """One injected fault. ``arg`` is already parsed: a phase, a pair, or a number."""

    kind: str
    meter: str
    arg: str | float | None = None

    @property
    def text(self) -> str:
        if self.arg is None:
            return f"{self.kind}:{self.meter}"
        arg = f"{self.arg:g}" if isinstance(self.arg, float) else self.arg
        return f"{self.kind}:{self.meter}:{arg}"

    def __str__(self) -> str:
        return self.text


def _usage(kind: str) -> str:
    shape, required = KINDS[kind]
    return f"{kind}:METER:{shape}" if required else f"{kind}:METER"


def _number(text: str, what: str, fault: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise BenchwalkError(f"fault {fault!r}: {what} {text!r} is not a number") from None
    if not math.isfinite(x) or x <= 0:
        raise BenchwalkError(f"fault {fault!r}: {what} must be a positive number, got {text}")
    return x


def parse_fault(text: str) -> Fault:
    """``"ct-reversed:M3:B"`` -> ``Fault("ct-reversed", "M3", "B")``; one clear line on error."""
    parts = text.strip().split(":")
    kind = parts[0].strip().lower()
    if kind not in KINDS:
        known = ", ".join(KINDS)
        raise BenchwalkError(f"fault {text!r}: unknown kind {parts[0]!r}; known kinds: {known}")
    shape, required = KINDS[kind]
    if len(parts) < 2 or not parts[1].strip():
        raise BenchwalkError(f"fault {text!r}: name the meter, as {_usage(kind)}")
    meter = parts[1].strip()
    if kind == "offset":
        return Fault(kind, meter, _offset_arg(parts[2:], text))
    if len(parts) > 3 or (len(parts) == 3 and not required):
        raise BenchwalkError(f"fault {text!r}: too many parts; write {_usage(kind)}")
    if required and (len(parts) < 3 or not parts[2].strip()):
        raise BenchwalkError(f"fault {text!r}: missing {shape}; write {_usage(kind)}")
    if not required:
        return Fault(kind, meter)
    raw = parts[2].strip()
    arg: str | float
    if kind == "ct-reversed":
        arg = raw.upper()
        if arg not in PHASE_INDEX:
            raise BenchwalkError(f"fault {text!r}: phase must be A, B or C, got {raw!r}")
    elif kind == "phases-swapped":
        pair = raw.upper().replace("-", "")
        if len(pair) != 2 or pair[0] == pair[1] or any(p not in PHASE_INDEX for p in pair):
            raise BenchwalkError(f"fault {text!r}: pair must be two phases like B-C, got {raw!r}")
        arg = f"{pair[0]}-{pair[1]}"
    elif kind == "exception":
        if not raw.isdigit() or int(raw) not in EXCEPTION_CODES:
            codes = ", ".join(str(c) for c in sorted(EXCEPTION_CODES))
            raise BenchwalkError(f"fault {text!r}: Modbus exception code must be one of {codes}")
        arg = float(int(raw))
    else:
        what = "delay in seconds" if kind == "slow" else "factor"
        arg = _number(raw, what, text)
    return Fault(kind, meter, arg)


def _offset_arg(rest: Sequence[str], text: str) -> str:
    """``["i.B", "+2.5"]`` -> ``"i.B:+2.5"`` (the key and the amount, normalised)."""
    if len(rest) != 2 or not all(x.strip() for x in rest):
        raise BenchwalkError(f"fault {text!r}: write {_usage('offset')}")
    key, raw = rest[0].strip(), rest[1].strip()
    if not is_valid_key(key):
        raise BenchwalkError(f"fault {text!r}: {key!r} is not a reading key like i.B or p.T")
    try:
        amount = float(raw)
    except ValueError:
        raise BenchwalkError(f"fault {text!r}: amount {raw!r} is not a number") from None
    if not math.isfinite(amount):
        raise BenchwalkError(f"fault {text!r}: amount must be a finite number, got {raw}")
    return f"{key}:{amount:+g}"


def offset_of(f: Fault) -> tuple[str, float]:
    """An ``offset`` fault's (reading key, amount in the key's primary unit)."""
    key, _, amount = str(f.arg).partition(":")
    return key, float(amount)


def parse_faults(texts: Iterable[str]) -> tuple[Fault, ...]:
    return tuple(parse_fault(t) for t in texts)


# faults a PLC can have as well as a meter: it stops answering, or answers with an exception
PLC_KINDS = frozenset({"offline", "exception"})


def validate_faults(profile: Profile, faults: Sequence[Fault]) -> None:
    """Every fault names a meter (or, for a comm fault, a PLC) of the profile; wiring faults
    need a current-measuring meter."""
    ids = [m.id for m in profile.meters]
    plcs = [p.id for p in profile.plcs]
    for f in faults:
        if f.meter in plcs:
            if f.kind not in PLC_KINDS:
                raise BenchwalkError(
                    f"fault {f.text!r}: {f.meter} is a PLC; a PLC takes only {' or '.join(sorted(PLC_KINDS))}"
                )
            continue
        if f.meter not in ids:
            known = ", ".join(ids) + (f"; PLCs: {', '.join(plcs)}" if plcs else "")
            raise BenchwalkError(
                f"fault {f.text!r}: meter {f.meter!r} is not in {profile.path}; meters: {known}"
            )
        if (
            f.kind in {"ct-reversed", "phases-swapped", "ct-ratio"}
            and profile.meter(f.meter).branch is None
        ):
            raise BenchwalkError(f"fault {f.text!r}: meter {f.meter} measures no current")
        if f.kind == "offset":
            key, _ = offset_of(f)
            keys = [r.key for r in profile.maps[profile.meter(f.meter).map_id].registers]
            if key not in keys:
                raise BenchwalkError(
                    f"fault {f.text!r}: meter {f.meter}'s register map has no {key}; "
                    f"it has {', '.join(keys)}"
                )


def faults_for(meter_id: str, faults: Iterable[Fault]) -> list[Fault]:
    return [f for f in faults if f.meter == meter_id]


def find(meter_id: str, faults: Iterable[Fault], kind: str) -> Fault | None:
    """The last fault of ``kind`` on the meter (a later one on the command line wins)."""
    hit = None
    for f in faults:
        if f.meter == meter_id and f.kind == kind:
            hit = f
    return hit

"""The vocabulary of measured quantities, shared by register maps, snapshots and datasets.

A reading is addressed by a key ``"<quantity>.<phase>"`` such as ``"p.A"``, ``"v_ll.BC"``
or ``"f.T"`` (``T`` = total or single-valued). Keeping one flat key makes snapshots cheap
dictionaries and the tidy dataset a trivial split.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Quantity:
    name: str
    unit: str
    phases: tuple[str, ...]
    description: str
    mmxu: str  # IEC 61850-7-4 MMXU data object name, for joining with substation data


QUANTITIES: dict[str, Quantity] = {
    q.name: q
    for q in (
        Quantity("v_ln", "V", ("A", "B", "C"), "phase-to-neutral voltage, rms", "PhV"),
        Quantity("v_ll", "V", ("AB", "BC", "CA"), "phase-to-phase voltage, rms", "PPV"),
        Quantity("i", "A", ("A", "B", "C", "N"), "current, rms", "A"),
        Quantity("p", "W", ("A", "B", "C", "T"), "active power", "W"),
        Quantity("q", "var", ("A", "B", "C", "T"), "reactive power (fundamental)", "VAr"),
        Quantity("s", "VA", ("A", "B", "C", "T"), "apparent power", "VA"),
        Quantity("pf", "1", ("A", "B", "C", "T"), "power factor, sign of P", "PF"),
        Quantity("f", "Hz", ("T",), "frequency", "Hz"),
        Quantity(
            "v_ang", "deg", ("A", "B", "C"), "voltage phase angle, referred to V_A", "PhV.ang"
        ),
        Quantity("i_ang", "deg", ("A", "B", "C"), "current phase angle, referred to V_A", "A.ang"),
        Quantity("e_imp", "Wh", ("T",), "active energy imported (counter)", "TotWh"),
        Quantity("e_exp", "Wh", ("T",), "active energy exported (counter)", "TotWh"),
    )
}

PHASES = ("A", "B", "C")
LL_PAIRS = ("AB", "BC", "CA")


def key(quantity: str, phase: str) -> str:
    return f"{quantity}.{phase}"


def split_key(k: str) -> tuple[str, str]:
    quantity, _, phase = k.partition(".")
    return quantity, phase


def all_keys() -> list[str]:
    return [key(q.name, ph) for q in QUANTITIES.values() for ph in q.phases]


def is_valid_key(k: str) -> bool:
    quantity, phase = split_key(k)
    q = QUANTITIES.get(quantity)
    return q is not None and phase in q.phases


def unit_of(k: str) -> str:
    return QUANTITIES[split_key(k)[0]].unit

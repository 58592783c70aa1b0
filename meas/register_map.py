"""A meter model's register map as the profile declares it: where each quantity lives in the
register space, how its words become units, and the text registers that identify a device.

Part of the profile contract (``meas.model.Profile.maps``), in a module of its own because only
the map reader (``meas.profile.maps``), the poll plan and codec (``meas.modbus``) and the
simulated meters look inside a map. The register vocabularies are written here once, the way
``meas.model`` writes the others: a Literal for the type checker and its tuple from ``get_args``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, get_args

RegisterKind = Literal["holding", "input"]
REGISTER_KINDS: tuple[RegisterKind, ...] = get_args(RegisterKind)
DataType = Literal["int16", "uint16", "int32", "uint32", "float32", "float64", "int64", "uint64"]
DATA_TYPES: tuple[DataType, ...] = get_args(DataType)
# Text registers (ASCII, two characters per register) identify a device; they are never a
# measured quantity, so they sit beside the numeric data types, under identification keys.
TextType = Literal["string"]
TEXT_TYPES: tuple[TextType, ...] = get_args(TextType)
IdentKey = Literal["serial", "firmware", "model", "vendor", "hardware"]
IDENT_KEYS: tuple[IdentKey, ...] = get_args(IdentKey)
Order = Literal["big", "little"]
ORDERS: tuple[Order, ...] = get_args(Order)
ApparentPower = Literal["vector", "arithmetic"]  # IEEE 1459 definitions of S_total
APPARENT_POWER: tuple[ApparentPower, ...] = get_args(ApparentPower)

REGISTER_COUNT: dict[str, int] = dict(zip(DATA_TYPES, (1, 1, 2, 2, 2, 4, 4, 4), strict=True))


@dataclass(frozen=True)
class RegisterSpec:
    """Where one quantity lives in a meter's register space and how to turn words into units."""

    key: str  # "<quantity>.<phase>", see meas.quantities
    kind: RegisterKind
    address: int
    dtype: DataType
    word_order: Order = "big"
    byte_order: Order = "big"
    scale: float = 1.0  # engineering value = raw * scale + offset
    offset: float = 0.0
    unit: str = ""

    @property
    def count(self) -> int:
        return REGISTER_COUNT[self.dtype]

    @property
    def end(self) -> int:
        """One past the last register used."""
        return self.address + self.count


@dataclass(frozen=True)
class TextSpec:
    """A text register block that identifies the device (serial number, firmware version).

    ``count`` registers, two ASCII characters each, the first in the high byte unless
    ``byte_order`` is little (common practice in Modbus device maps); trailing NULs and spaces
    are padding. Read once per meter, never polled as a reading.
    """

    key: IdentKey
    kind: RegisterKind
    address: int
    count: int
    byte_order: Order = "big"

    @property
    def end(self) -> int:
        """One past the last register used."""
        return self.address + self.count


@dataclass(frozen=True)
class RegisterMap:
    """One meter model's register layout, reusable by many meters."""

    id: str
    registers: tuple[RegisterSpec, ...]
    description: str = ""
    apparent_power: ApparentPower = "arithmetic"
    max_read: int = 125  # some meters accept fewer registers per read than the spec allows
    text: tuple[TextSpec, ...] = ()  # identification strings (``TextSpec``), read once

    def has(self, key: str) -> bool:
        return any(r.key == key for r in self.registers)

    def spec(self, key: str) -> RegisterSpec:
        for r in self.registers:
            if r.key == key:
                return r
        raise KeyError(key)

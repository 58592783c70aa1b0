"""Reading a COMTRADE record for fault validation through the ``comtrade`` package (MIT).

``comtrade`` 0.2.0 reads every variant we write (1999 and 2013; ASCII, BINARY, BINARY32,
FLOAT32; .cfg/.dat and .cff) when asked for double precision and numpy arrays
(CALIBRATION_NOTES §2.4). It does not notice a short .dat (it keeps the missing rows as zeros)
or a .cfg whose sample count disagrees with the data, so the data size is checked here first.
Every problem is one ``BenchwalkError`` line naming the file.

Channels are chosen by name (``currents``/``voltages``, in the same phase order) or, by
default, as the analog channels whose unit is a current (A, kA) or a voltage (V, kV) and whose
phase is A, B, C (or L1, L2, L3), in that order; voltages are phase to ground.
Values are made primary by each channel's own P/S flag and primary/secondary ratio unless
``as_recorded`` is set; either way ``Record.notes`` states what was done per channel.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import BenchwalkError

_CURRENT_UNITS = {"a": 1.0, "ka": 1000.0}
_VOLTAGE_UNITS = {"v": 1.0, "kv": 1000.0}
_ROW_ANALOG_BYTES = {"BINARY": 2, "BINARY32": 4, "FLOAT32": 4}
_CFF_DAT = re.compile(rb"--- file type: DAT (\w+)(?:\s*:\s*(\d+))? ---\r?\n", re.IGNORECASE)


@dataclass(frozen=True)
class Record:
    """The channels a fault validation needs, primary (unless as recorded), SI units."""

    path: str
    revision: str
    data_format: str
    frequency_hz: float
    fs_hz: float
    t: np.ndarray  # s from the first sample
    trigger_s: float  # trigger time from the first sample
    current_names: tuple[str, ...]
    currents: np.ndarray  # (phases, samples), A
    voltage_names: tuple[str, ...]
    voltages: np.ndarray | None  # (phases, samples), V phase-to-ground
    values: str  # "primary" or "as recorded"
    notes: tuple[str, ...]


def _phase(ph: str) -> str:
    """A channel's phase as A, B or C ('A', 'a', 'PhA', 'L1'); '' for anything else (e.g. 'AB')."""
    p = ph.strip().upper().removeprefix("PH")
    return {"L1": "A", "L2": "B", "L3": "C"}.get(p, p if p in ("A", "B", "C") else "")


def _fail(path: Path, message: str) -> BenchwalkError:
    return BenchwalkError(f"{path}: {message}")


def _row_count_check(
    path: Path, fmt: str, n_analog: int, n_status: int, samples: int, data: bytes
) -> None:
    fmt = fmt.upper()
    if fmt == "ASCII":
        rows = [
            ln
            for ln in data.decode("ascii", errors="replace").splitlines()
            if ln.strip() and ln.strip() != "\x1a"
        ]
        if len(rows) != samples:
            raise _fail(
                path,
                f"the .cfg states {samples} samples but the data holds {len(rows)} rows; the .dat is truncated or the .cfg is wrong",
            )
        return
    if fmt not in _ROW_ANALOG_BYTES:
        raise _fail(
            path, f"unknown data file type {fmt!r} in the .cfg (ASCII, BINARY, BINARY32 or FLOAT32)"
        )
    row = 8 + n_analog * _ROW_ANALOG_BYTES[fmt] + 2 * math.ceil(n_status / 16)
    data = data.rstrip(b"\x1a") if len(data) % row else data
    if len(data) % row:
        raise _fail(
            path,
            f"the .dat ends inside a sample ({len(data)} bytes is not a whole number of {row}-byte rows); the file is truncated",
        )
    if len(data) // row != samples:
        raise _fail(
            path,
            f"the .cfg states {samples} samples but the .dat holds {len(data) // row}; the .dat is truncated or the .cfg is wrong",
        )
    table = np.frombuffer(data, dtype=np.uint8).reshape(-1, row)
    numbers = table[:, :4].copy().view("<u4").ravel()
    if len(numbers) and not np.array_equal(
        numbers, np.arange(numbers[0], numbers[0] + len(numbers))
    ):
        raise _fail(
            path,
            "the sample numbers in the .dat are not consecutive; samples are missing or the file is damaged",
        )


def _data_of(path: Path) -> bytes:
    """The raw data part: the .dat beside a .cfg, or the DAT section of a .cff."""
    if path.suffix.lower() == ".cff":
        blob = path.read_bytes()
        m = _CFF_DAT.search(blob)
        if m is None:
            raise _fail(path, "no '--- file type: DAT ... ---' section; not a complete .cff")
        data = blob[m.end() :]
        if m.group(2) is not None and len(data) != int(m.group(2)):
            raise _fail(
                path,
                f"the DAT section states {int(m.group(2))} bytes but holds {len(data)}; the file is truncated",
            )
        return data
    dat = next(
        (path.with_suffix(s) for s in (".dat", ".DAT") if path.with_suffix(s).exists()), None
    )
    if dat is None:
        raise _fail(path, f"no data file {path.with_suffix('.dat').name} beside it")
    return dat.read_bytes()


def _load(path: Path) -> Any:
    import comtrade

    if not path.exists():
        raise BenchwalkError(f"{path}: no such record")
    if path.suffix.lower() not in (".cfg", ".cff"):
        raise _fail(path, "a record is a COMTRADE .cfg (with its .dat) or a .cff")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            rec = comtrade.Comtrade(
                use_double_precision=True, use_numpy_arrays=True, ignore_warnings=True
            )
            if path.suffix.lower() == ".cfg":
                cfg = comtrade.Cfg(ignore_warnings=True)
                cfg.load(str(path))
                _row_count_check(
                    path,
                    cfg.ft,
                    cfg.analog_count,
                    cfg.status_count,
                    int(cfg.sample_rates[-1][1]),
                    _data_of(path),
                )
            rec.load(str(path))
    except BenchwalkError:
        raise
    except (
        ValueError,
        IndexError,
        KeyError,
        TypeError,
        UnicodeDecodeError,
        comtrade.ComtradeError,
    ) as exc:
        raise _fail(path, f"not a readable COMTRADE record ({type(exc).__name__}: {exc})") from None
    if path.suffix.lower() == ".cff":
        cfg = rec.cfg
        _row_count_check(
            path,
            cfg.ft,
            cfg.analog_count,
            cfg.status_count,
            int(cfg.sample_rates[-1][1]),
            _data_of(path),
        )
    return rec


def _unit_error(path: Path, name: str, unit: str, what: str) -> BenchwalkError:
    allowed = "A or kA" if what == "currents" else "V or kV"
    return _fail(path, f"channel {name!r} has unit {unit!r}; {what} must be in {allowed}")


def read_record(
    path: str | Path,
    currents: Sequence[str] | None = None,
    voltages: Sequence[str] | None = None,
    *,
    as_recorded: bool = False,
) -> Record:
    """Read a record and return the chosen phase currents and voltages (primary by default)."""
    p = Path(path)
    rec = _load(p)
    cfg = rec.cfg
    chans = cfg.analog_channels
    notes: list[str] = []

    def select(names: Sequence[str] | None, units: dict[str, float], what: str) -> list[int]:
        ids = [c.name.strip() for c in chans]
        if names:
            for n in names:
                if n not in ids:
                    raise _fail(
                        p,
                        f"no analog channel {n!r} for the {what}; the record has {', '.join(ids)}",
                    )
            picked = [ids.index(n) for n in names]
        else:
            picked = [
                k
                for ph in "ABC"
                for k in [
                    next(
                        (
                            i
                            for i, c in enumerate(chans)
                            if c.uu.strip().lower() in units and _phase(c.ph) == ph
                        ),
                        -1,
                    )
                ]
                if k >= 0
            ]
        for k in picked:
            if chans[k].uu.strip().lower() not in units:
                raise _unit_error(p, ids[k], chans[k].uu.strip(), what)
        return picked

    def values(k: int, units: dict[str, float]) -> np.ndarray:
        c = chans[k]
        x = np.asarray(rec.analog[k], dtype=float) * units[c.uu.strip().lower()]
        if np.isnan(x).any():
            raise _fail(
                p, f"channel {c.name.strip()!r} has {int(np.isnan(x).sum())} missing samples"
            )
        flag = str(c.pors).strip().upper() or "P"
        if as_recorded:
            notes.append(
                f"{c.name.strip()}: values taken as recorded ({'secondary' if flag == 'S' else 'primary'} per the file)"
            )
            return x
        if flag == "S":
            if not (c.primary > 0 and c.secondary > 0):
                raise _fail(
                    p,
                    f"channel {c.name.strip()!r} is secondary but states no primary/secondary ratio",
                )
            ratio = c.primary / c.secondary
            notes.append(
                f"{c.name.strip()}: file values are secondary; multiplied by {c.primary:g}/{c.secondary:g} = {ratio:g} to primary"
            )
            return x * ratio
        notes.append(
            f"{c.name.strip()}: file values are primary (ratio {c.primary:g}/{c.secondary:g} not applied)"
        )
        return x

    ic = select(currents, _CURRENT_UNITS, "currents")
    if not ic:
        raise _fail(
            p, "no current channels (unit A or kA, phases A, B, C); name them with --currents"
        )
    iv = select(voltages, _VOLTAGE_UNITS, "voltages")
    cur = np.vstack([values(k, _CURRENT_UNITS) for k in ic])
    vol = np.vstack([values(k, _VOLTAGE_UNITS) for k in iv]) if iv else None
    rates = {float(r[0]) for r in cfg.sample_rates}
    if len(rates) > 1:
        raise _fail(
            p,
            f"the record has {len(rates)} sampling rates; the analysis needs one (resample the record)",
        )
    fs = float(cfg.sample_rates[0][0])
    t = np.asarray(rec.time, dtype=float)
    if fs <= 0:
        fs = float(1.0 / np.median(np.diff(t)))
    return Record(
        path=str(p),
        revision=str(cfg.rev_year),
        data_format=str(cfg.ft).upper(),
        frequency_hz=float(cfg.frequency or 50.0),
        fs_hz=fs,
        t=t - t[0],
        trigger_s=float((cfg.trigger_timestamp - cfg.start_timestamp).total_seconds()),
        current_names=tuple(chans[k].name.strip() for k in ic),
        currents=cur,
        voltage_names=tuple(chans[k].name.strip() for k in iv),
        voltages=vol,
        values="as recorded" if as_recorded else "primary",
        notes=tuple(notes),
    )

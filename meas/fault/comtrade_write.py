"""A COMTRADE writer (IEEE C37.111-1999 and -2013): .cfg + .dat, or one .cff (2013 only).

Used by the simulated staged fault and the tests, so records are regenerated from a formula
rather than committed. Variants: 1999 ASCII and BINARY (int16), 2013 ASCII, BINARY (int16),
BINARY32 (int32) and FLOAT32. Layout of the files as C37.111 gives it (REFERENCES.md §9):
the .cfg lines ``station,device,rev_year``; ``TT,##A,##D``; one line per analog channel
``n,id,ph,ccbm,uu,a,b,skew,min,max,primary,secondary,PS``; one per status channel
``n,id,ph,ccbm,y``; ``lf``; ``nrates``; ``samp,endsamp``; the first-sample and trigger times;
``ft``; ``timemult``; (2013) ``time_code,local_code`` and ``tmq_code,leapsec``. Binary .dat
rows are little-endian ``uint32 n, uint32 timestamp, analog values, uint16 status words``.
Integer formats store x = a * raw + b with ``raw`` spread over the format's range; the most
negative value is reserved for a missing sample.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

Revision = Literal["1999", "2013"]
DataFormat = Literal["ASCII", "BINARY", "BINARY32", "FLOAT32"]
VARIANTS: tuple[tuple[Revision, DataFormat], ...] = (
    ("1999", "ASCII"),
    ("1999", "BINARY"),
    ("2013", "BINARY32"),
    ("2013", "FLOAT32"),
    ("2013", "ASCII"),
)
# largest raw magnitude per integer format (ASCII keeps clear of the 99999 missing marker)
_RAW_MAX = {"ASCII": 99998, "BINARY": 32767, "BINARY32": 2147483647}
_RAW_DTYPE = {"BINARY": "<i2", "BINARY32": "<i4", "FLOAT32": "<f4"}


@dataclass(frozen=True)
class AnalogSignal:
    name: str
    phase: str
    unit: str
    values: np.ndarray  # in the unit, as the file states them (primary or secondary per ps)
    primary: float = 1.0
    secondary: float = 1.0
    ps: Literal["P", "S"] = "P"
    circuit: str = ""


@dataclass(frozen=True)
class StatusSignal:
    name: str
    values: np.ndarray  # 0/1
    phase: str = ""
    circuit: str = ""


@dataclass(frozen=True)
class RecordData:
    """What a recorder captured: equally spaced samples from ``start`` at ``fs_hz``."""

    station: str
    device: str
    frequency_hz: float
    fs_hz: float
    start: dt.datetime
    trigger_offset_s: float
    analogs: tuple[AnalogSignal, ...]
    statuses: tuple[StatusSignal, ...] = field(default=())

    @property
    def samples(self) -> int:
        return len(self.analogs[0].values)


def _scaling(values: np.ndarray, fmt: DataFormat) -> tuple[float, float]:
    if fmt == "FLOAT32":
        return 1.0, 0.0
    lo, hi = float(np.min(values)), float(np.max(values))
    b = (hi + lo) / 2.0
    span = max((hi - lo) / 2.0, 1e-12)
    return span / _RAW_MAX[fmt], b


def _stamp(t: dt.datetime) -> str:
    return t.strftime("%d/%m/%Y,%H:%M:%S.%f")


def cfg_text(
    rec: RecordData, rev: Revision, fmt: DataFormat, scales: list[tuple[float, float]]
) -> str:
    na, ns = len(rec.analogs), len(rec.statuses)
    lines = [f"{rec.station},{rec.device},{rev}", f"{na + ns},{na}A,{ns}D"]
    for k, (a_sig, (a, b)) in enumerate(zip(rec.analogs, scales, strict=True), start=1):
        if fmt == "FLOAT32":
            cmin, cmax = -3.4e38, 3.4e38
        else:
            cmin, cmax = -_RAW_MAX[fmt], _RAW_MAX[fmt]
        lines.append(
            f"{k},{a_sig.name},{a_sig.phase},{a_sig.circuit},{a_sig.unit},{a!r},{b!r},0,"
            f"{cmin:g},{cmax:g},{a_sig.primary:g},{a_sig.secondary:g},{a_sig.ps}"
        )
    for k, s in enumerate(rec.statuses, start=1):
        lines.append(f"{k},{s.name},{s.phase},{s.circuit},0")
    lines += [f"{rec.frequency_hz:g}", "1", f"{rec.fs_hz:g},{rec.samples}"]
    lines.append(_stamp(rec.start))
    lines.append(_stamp(rec.start + dt.timedelta(seconds=rec.trigger_offset_s)))
    lines += [fmt, "1"]
    if rev == "2013":
        lines += ["+0h00,+0h00", "0,0"]
    return "\r\n".join(lines) + "\r\n"


def _raw(rec: RecordData, fmt: DataFormat) -> tuple[list[np.ndarray], list[tuple[float, float]]]:
    raws, scales = [], []
    for sig in rec.analogs:
        a, b = _scaling(sig.values, fmt)
        scales.append((a, b))
        if fmt == "FLOAT32":
            raws.append(np.asarray(sig.values, dtype="<f4"))
        else:
            raws.append(np.rint((np.asarray(sig.values) - b) / a).astype(np.int64))
    return raws, scales


def _timestamps(rec: RecordData) -> np.ndarray:
    return np.rint(np.arange(rec.samples) / rec.fs_hz * 1e6).astype(np.int64)  # microseconds


def _status_words(rec: RecordData) -> np.ndarray:
    words = np.zeros((rec.samples, math.ceil(len(rec.statuses) / 16)), dtype=np.uint16)
    for k, s in enumerate(rec.statuses):
        words[:, k // 16] |= (np.asarray(s.values).astype(np.uint16) & 1) << (k % 16)
    return words


def dat_bytes(rec: RecordData, fmt: DataFormat) -> tuple[bytes, list[tuple[float, float]]]:
    """The .dat content and the (a, b) of each analog channel."""
    raws, scales = _raw(rec, fmt)
    n = np.arange(1, rec.samples + 1)
    ts = _timestamps(rec)
    words = _status_words(rec)
    if fmt == "ASCII":
        cols = [n, ts, *raws, *(np.asarray(s.values).astype(np.int64) for s in rec.statuses)]
        text = "\r\n".join(",".join(str(int(v)) for v in row) for row in zip(*cols, strict=True))
        return (text + "\r\n").encode("ascii"), scales
    fields = [("n", "<u4"), ("t", "<u4")]
    fields += [(f"a{k}", _RAW_DTYPE[fmt]) for k in range(len(raws))]
    fields += [(f"d{k}", "<u2") for k in range(words.shape[1])]
    rows = np.zeros(rec.samples, dtype=fields)
    rows["n"], rows["t"] = n, ts
    for k, r in enumerate(raws):
        rows[f"a{k}"] = r
    for k in range(words.shape[1]):
        rows[f"d{k}"] = words[:, k]
    return rows.tobytes(), scales


def write_comtrade(
    stem: Path, rec: RecordData, rev: Revision, fmt: DataFormat, *, cff: bool = False
) -> Path:
    """Write ``stem.cfg`` + ``stem.dat`` (or ``stem.cff``); returns the path to load."""
    if cff and rev != "2013":
        raise ValueError("a .cff file is a 2013 format")
    if (rev, fmt) not in VARIANTS and not (rev == "2013" and fmt == "BINARY"):
        raise ValueError(f"no COMTRADE {rev} {fmt} variant")
    data, scales = dat_bytes(rec, fmt)
    cfg = cfg_text(rec, rev, fmt, scales)
    stem.parent.mkdir(parents=True, exist_ok=True)
    if cff:
        path = stem.with_suffix(".cff")
        size = f": {len(data)}" if fmt != "ASCII" else ""
        head = (
            "--- file type: CFG ---\r\n" + cfg + "--- file type: INF ---\r\n"
            "--- file type: HDR ---\r\n" + f"--- file type: DAT {fmt}{size} ---\r\n"
        )
        path.write_bytes(head.encode("ascii") + data)
        return path
    stem.with_suffix(".cfg").write_text(cfg, encoding="ascii", newline="")
    stem.with_suffix(".dat").write_bytes(data)
    return stem.with_suffix(".cfg")

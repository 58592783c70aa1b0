"""The ``measurements`` table from the journal's packed rows, streamed in batches.

One row per meter, quantity and phase per snapshot, built in batches from the packed journal
rows with the repeated columns of each (meter, key set) made once; a poll journalled twice is
written once. Parquet gets real timestamps, CSV the journal's ISO text.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa

from ..bases import bases_of_json, network_factor, per_unit_base
from ..journal.read import JournalView
from ..journal.schema import QUALITY_CODES
from ..quantities import QUANTITIES, split_key
from .derived import Uncertainty, profile_from_texts, repeated_polls
from .schema import column_names
from .tables import Json, utc_timestamps
from .vocabulary import iec61850

BATCH_READINGS = 4000  # journal rows (one meter, one snapshot) per streamed batch

Columns = dict[str, np.ndarray]  # one batch of measurements, column -> values


def _meter_factors(
    profile: Json, meter: Json, keys: Sequence[str]
) -> tuple[np.ndarray, np.ndarray]:
    """Per key: factor to network scale, and per-unit base (NaN where the profile defines none)."""
    bases = bases_of_json(profile, meter["bus"])
    net = np.full(len(keys), 1.0)
    pu = np.full(len(keys), math.nan)
    for n, k in enumerate(keys):
        net[n] = network_factor(bases, k)
        base = per_unit_base(bases, k)
        if base is not None:
            pu[n] = base.base
    return net, pu


@dataclass
class _Template:
    """Per (meter, key set): the repeated columns of one reading row, built once."""

    meter: np.ndarray
    quantity: np.ndarray
    phase: np.ndarray
    unit: np.ndarray
    mmxu: np.ndarray
    net: np.ndarray
    pu: np.ndarray


def _template(profile: Json, meters: dict[str, Json], meter: str, keys: Sequence[str]) -> _Template:
    qs, phs = zip(*(split_key(k) for k in keys), strict=True) if keys else ((), ())
    units = [QUANTITIES[q].unit if q in QUANTITIES else "" for q in qs]
    mmxu = [
        ".".join(iec61850(q, ph)) if q in QUANTITIES else "" for q, ph in zip(qs, phs, strict=True)
    ]
    m = meters.get(meter)
    if m is None:
        net, pu = np.full(len(keys), math.nan), np.full(len(keys), math.nan)
    else:
        net, pu = _meter_factors(profile, m, keys)
    obj = lambda xs: np.array(xs, dtype=object)  # noqa: E731
    return _Template(obj([meter] * len(keys)), obj(qs), obj(phs), obj(units), obj(mmxu), net, pu)


_QUAL_NAMES = np.array([str(q) for q in QUALITY_CODES], dtype=object)


def measurement_batches(view: JournalView, session: str, profile: Json) -> Iterator[Columns]:
    """Column arrays of at most BATCH_READINGS journal rows each, in snapshot order; a poll
    journalled twice (settling, then capture) is written once, as its capture row."""
    keysets = view.keysets()
    skip = repeated_polls(view.snapshots())
    model = profile_from_texts(view.profile_files())
    unc = Uncertainty(model) if model is not None else None
    meters = {m["id"]: m for m in profile["meters"]}
    templates: dict[tuple[str, int], _Template] = {}
    for rows in view.reading_batches(BATCH_READINGS):
        parts: dict[str, list[Any]] = {
            k: [] for k in ("snap", "step", "role", "time", "tpl", "vals", "qual", "n")
        }
        rows = [r for r in rows if r.snapshot not in skip]
        if not rows:
            continue
        for r in rows:
            key = (r.meter, r.keyset)
            tpl = templates.get(key)
            if tpl is None:
                tpl = templates[key] = _template(profile, meters, r.meter, keysets[r.keyset])
            vals = np.frombuffer(r.vals, dtype="<f8")
            parts["vals"].append(vals)
            parts["qual"].append(np.frombuffer(r.qual, dtype=np.uint8))
            parts["tpl"].append(tpl)
            parts["n"].append(len(vals))
            parts["snap"].append(r.snapshot)
            parts["step"].append(r.step)
            parts["role"].append(r.role)
            parts["time"].append(r.time_utc)
        n = np.array(parts["n"])
        value = np.concatenate(parts["vals"])
        tpls = parts["tpl"]
        net = np.concatenate([t.net for t in tpls])
        pu = np.concatenate([t.pu for t in tpls])
        meter_ids = [t.meter[0] if len(t.meter) else "" for t in tpls]
        u = (
            unc.of_rows(meter_ids, [list(keysets[r.keyset]) for r in rows], parts["vals"])
            if unc is not None
            else np.full(value.size, np.nan)
        )
        yield {
            "session": np.full(value.size, session, dtype=object),
            "step": np.repeat(np.array(parts["step"], dtype=object), n),
            "snapshot": np.repeat(np.array(parts["snap"], dtype=np.int64), n),
            "role": np.repeat(np.array(parts["role"], dtype=object), n),
            "time_iso": np.repeat(np.array(parts["time"], dtype=object), n),
            "meter": np.concatenate([t.meter for t in tpls]),
            "quantity": np.concatenate([t.quantity for t in tpls]),
            "phase": np.concatenate([t.phase for t in tpls]),
            "value": value,
            "u": u,
            "unit": np.concatenate([t.unit for t in tpls]),
            "quality": _QUAL_NAMES[np.concatenate(parts["qual"])],
            "value_network": value * net,
            "value_pu": value / pu,
            "iec61850": np.concatenate([t.mmxu for t in tpls]),
        }


def _num_array(x: np.ndarray) -> pa.Array:
    """NaN becomes null: a failed read is missing, never a number."""
    return pa.array(x, type=pa.float64(), mask=np.isnan(x))


def measurement_tables(cols: Columns) -> tuple[pa.Table, pa.Table]:
    common = {
        "session": pa.array(cols["session"], pa.string()),
        "step": pa.array(cols["step"], pa.string()),
        "snapshot": pa.array(cols["snapshot"], pa.int64()),
        "role": pa.array(cols["role"], pa.string()),
    }
    rest = {
        "meter": pa.array(cols["meter"], pa.string()),
        "quantity": pa.array(cols["quantity"], pa.string()),
        "phase": pa.array(cols["phase"], pa.string()),
        "value": _num_array(cols["value"]),
        "u": _num_array(cols["u"]),
        "unit": pa.array(cols["unit"], pa.string()),
        "quality": pa.array(cols["quality"], pa.string()),
        "value_network": _num_array(cols["value_network"]),
        "value_pu": _num_array(cols["value_pu"]),
        "iec61850": pa.array(cols["iec61850"], pa.string()),
    }
    iso = pa.array(cols["time_iso"], pa.string())
    # the time column is the same per snapshot: parse each distinct value once
    uniq, inv = np.unique(cols["time_iso"].astype(str), return_inverse=True)
    ts = utc_timestamps(uniq.tolist()).take(pa.array(inv))
    pq_t = pa.table({**common, "time_utc": ts, **rest}).select(column_names("measurements"))
    csv_t = pa.table({**common, "time_utc": iso, **rest}).select(column_names("measurements"))
    return pq_t, csv_t

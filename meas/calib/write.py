"""Write a calibration's folder atomically, beside the dataset it came from.

Everything goes into a temporary folder next to the target, is fsync'd and renamed into place
(the dataset export's own swap), so a failure never leaves half a folder. A rejected fit still
gets its tables, fit.json and report (they show why), but no calibrated profile: a profile
that looks usable must only come from an accepted fit.
"""

from __future__ import annotations

import json
import os
import shutil
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pandas as pd

from ..dataset.export import DP_SCHEMA, remove_stale_exports
from ..dataset.export import _swap_in as swap_in  # the one atomic swap of a folder
from ..dataset.files import fsync_dir, fsync_file, sha256_of, slug
from ..dataset.read import Dataset
from ..dataset.schema import MAIN_PROFILE, PROFILE_DIR
from ..errors import BenchwalkError
from .profile_text import calibrated_text
from .report import render
from .run import Calibration
from .tables import (
    correlations_table,
    deviations_table,
    fit_summary,
    gains_table,
    identifiability_table,
    parameter_covariance,
    parameters_table,
)

_TABLES = {
    "parameters": ("Fitted model parameters with uncertainty and verdict", parameters_table),
    "identifiability": (
        "Singular values of the data Jacobian and their combinations",
        identifiability_table,
    ),
    "correlations": ("Pairs of unknowns correlated above 0.9", correlations_table),
    "deviations": (
        "Model against readings before and after, per step, meter, quantity, phase",
        deviations_table,
    ),
    "meter_gains": ("Fitted gain per meter and quantity against its class", gains_table),
}
_TYPES = {"f": "number", "i": "integer", "b": "boolean"}


def default_out(dataset: Path) -> Path:
    dataset = Path(dataset).resolve()
    return dataset.parent / f"{dataset.name}-calibration"


def _schema(df: pd.DataFrame) -> dict[str, Any]:
    return {
        "fields": [
            {"name": str(c), "type": _TYPES.get(df[c].dtype.kind, "string")} for c in df.columns
        ]
    }


def _file(folder: Path, rel: str, fmt: str, media: str) -> dict[str, Any]:
    """A non-table resource: a plain file with its hash (Data Package v2 ``type: file``)."""
    return {
        "name": slug(rel),
        "type": "file",
        "path": rel,
        "format": fmt,
        "mediatype": media,
        "hash": "sha256:" + sha256_of(folder / rel),
    }


def _write(folder: Path, ds: Dataset, c: Calibration, date: str) -> dict[str, Any]:
    folder.mkdir(parents=True)
    resources = []
    for name, (title, build) in _TABLES.items():
        df = build(c)
        path = folder / f"{name}.csv"
        df.to_csv(path, index=False)
        resources.append(
            {
                "name": name.replace("_", "-"),
                "type": "table",
                "path": path.name,
                "format": "csv",
                "mediatype": "text/csv",
                "title": title,
                "schema": _schema(df),
                "hash": "sha256:" + sha256_of(path),
            }
        )
    dataset_info = {
        "session": ds.session,
        "path": str(ds.path),
        "datapackage_sha256": sha256_of(ds.path / "datapackage.json"),
    }
    summary = fit_summary(c, dataset_info)
    summary["written_utc"] = date
    if c.verdict.accepted:
        prof = folder / PROFILE_DIR
        prof.mkdir()
        for rel, text in ds.profile_files.items():
            name = rel.removeprefix(PROFILE_DIR + "/")
            dest = prof / name
            dest.parent.mkdir(parents=True, exist_ok=True)
            if name == MAIN_PROFILE:
                text = calibrated_text(text, c.profile, c.parameters, ds.session, date[:10])
            dest.write_text(text, encoding="utf-8")
        summary["calibrated_profile"] = f"{PROFILE_DIR}/{MAIN_PROFILE}"
    else:
        summary["calibrated_profile"] = None
    (folder / "fit.json").write_text(json.dumps(summary, indent=2, default=str) + "\n", "utf-8")
    # the fitted parameters' covariance, as ``benchwalk fault check --covariance`` reads it
    (folder / "covariance.json").write_text(
        json.dumps(parameter_covariance(c), indent=1) + "\n", "utf-8"
    )
    title = f"Calibration of {c.profile.bench.name} from session {ds.session}"
    (folder / "report.html").write_text(render(c, summary, title), encoding="utf-8")
    for extra, fmt, media in (
        ("fit.json", "json", "application/json"),
        ("covariance.json", "json", "application/json"),
        ("report.html", "html", "text/html"),
    ):
        resources.append(_file(folder, extra, fmt, media))
    if c.verdict.accepted:
        for p in sorted((folder / PROFILE_DIR).rglob("*")):
            if p.is_file():
                rel = p.relative_to(folder).as_posix()
                resources.append(_file(folder, rel, "toml", "application/toml"))
    pkg = {
        "$schema": DP_SCHEMA,
        "name": f"benchwalk-calibration-{slug(ds.session)}",
        "title": title,
        "created": date,
        "resources": resources,
        "benchwalk": {"kind": "calibration", "session": ds.session, "accepted": c.verdict.accepted},
    }
    (folder / "datapackage.json").write_text(json.dumps(pkg, indent=2) + "\n", encoding="utf-8")
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            fsync_file(p)
    fsync_dir(folder)
    return summary


def write_calibration(
    ds: Dataset, c: Calibration, out: Path | None = None, *, overwrite: bool = False
) -> Path:
    """Write the calibration folder (default: DATASET-calibration beside it); returns its path."""
    target = Path(out) if out is not None else default_out(ds.path)
    if target.exists() and not overwrite:
        raise BenchwalkError(
            f"{target}: a calibration already exists there; pass --overwrite to replace it or choose another --out"
        )
    date = datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        remove_stale_exports(target)
        tmp = target.parent / f".{target.name}.partial-{os.getpid()}"
        if tmp.exists():
            shutil.rmtree(tmp)
        try:
            _write(tmp, ds, c, date)
            swap_in(tmp, target)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
    except OSError as exc:
        raise BenchwalkError(
            f"{exc.filename or target}: writing the calibration failed ({exc.strerror or exc}); nothing was written"
        ) from exc
    return target

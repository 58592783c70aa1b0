"""The optional uncertainty input of a fault validation: a parameter covariance file.

Two plain forms, so a calibration (or a person) can write one without benchwalk:
- JSON: ``{"parameters": ["SRC.sc_va", "L1.r_ohm", ...], "values": [...],
  "covariance": [[...], ...]}`` (``"std": [...]`` instead of ``covariance`` for a diagonal);
- CSV with a header ``parameter,value,std`` (a diagonal covariance).
Names are the network model's ``BRANCH.key`` (``meas.network.parameters``); values in the
parameter's own unit. Errors name the file and what to fix.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np

from ..errors import BenchwalkError
from ..shortcircuit.uncertainty import Covariance


def read_covariance(path: str | Path) -> Covariance:
    p = Path(path)
    if not p.exists():
        raise BenchwalkError(f"{p}: no such covariance file")
    try:
        if p.suffix.lower() == ".json":
            doc = json.loads(p.read_text(encoding="utf-8"))
            names = [str(n) for n in doc["parameters"]]
            values = [float(v) for v in doc["values"]]
            if "covariance" in doc:
                matrix = np.array(doc["covariance"], dtype=float)
            else:
                matrix = np.diag(np.square(np.array(doc["std"], dtype=float)))
        elif p.suffix.lower() == ".csv":
            with p.open(newline="", encoding="utf-8") as fh:
                rows = list(csv.DictReader(fh))
            names = [r["parameter"].strip() for r in rows]
            values = [float(r["value"]) for r in rows]
            matrix = np.diag(np.square([float(r["std"]) for r in rows]))
        else:
            raise BenchwalkError(f"{p}: a covariance file is .json or .csv")
    except BenchwalkError:
        raise
    except (KeyError, ValueError, TypeError, json.JSONDecodeError) as exc:
        raise BenchwalkError(
            f"{p}: not a covariance table ({type(exc).__name__}: {exc}); see docs/fault-validation.md"
        ) from None
    if matrix.shape != (len(names), len(names)) or len(values) != len(names):
        raise BenchwalkError(
            f"{p}: {len(names)} parameters but {len(values)} values and a {matrix.shape} covariance"
        )
    if not np.allclose(matrix, matrix.T) or np.linalg.eigvalsh(matrix).min() < -1e-12 * max(
        1.0, float(np.abs(matrix).max())
    ):
        raise BenchwalkError(f"{p}: the covariance is not symmetric positive semi-definite")
    return Covariance(tuple(names), tuple(values), matrix)

"""A second invented bench, unlike the demo one: meshed (a ring), with a two-winding transformer
and one lone meter on each side of it, so tests of the estimator and of calibration see a
network whose redundancy comes from the model and from switching, not from twin meters.

The profile (``meshed_bench.toml`` beside this file) holds its register maps, its model data
with a few stated tolerances, and an invented ten-step sequence with fast captures. Layout:

- ring ``B0 -L1- B1 -L2- B2 -L3- B0`` (``QA`` on L1 and ``QB`` on L3, both remote): meshed with
  both closed, radial with either open;
- transformer ``T1`` (15 kVA, 400/230 V, Dyn11, tap -2.5 %) from ring node B2 to the 230 V
  busbar B3 (manual isolator ``QT``), an LV cable ``L5`` to B4 and its load bank (``KL``);
- a capacitor bank at B2 (``KC``, remote), a load bank at B1, an unmetered station load at B3;
- meters: ``MA`` and ``MB`` at the supply busbar (heads of L1 and L3), ``MC`` on the B1 load
  bank, ``MT`` alone on the HV side (into T1, CT/VT-operated, secondary values) and ``ML`` alone
  on the LV side (into the cable L5).
"""

from __future__ import annotations

import shutil
from pathlib import Path

from meas.model import Profile
from meas.profile import load_profile

MESHED_BENCH = Path(__file__).resolve().with_name("meshed_bench.toml")
TRANSFORMER = "T1"
HV_METER = "MT"  # the only meter on the transformer's HV side
LV_METER = "ML"  # the only meter on its LV side
RING = ("L1", "L2", "L3")


def meshed_bench() -> tuple[Profile, Path]:
    """The meshed bench's Profile and the path of its file."""
    return load_profile(MESHED_BENCH), MESHED_BENCH


def write_meshed_bench(folder: Path) -> Path:
    """A copy of the profile in ``folder`` (for tests that edit it or run sessions from it)."""
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / MESHED_BENCH.name
    shutil.copyfile(MESHED_BENCH, target)
    return target

"""What the fit is fitted to: one value per step, meter, quantity and phase, with its spread.

A step is a switching configuration; every capture of it is a repeated look at the same
operating point. The fit takes the median over the captures (robust to one odd poll) and its
standard uncertainty from the within-step scatter. A few captures give a poor spread each, so
the relative scatter is pooled per meter and quantity over the steps (every step of one meter
sees the same instrument), never taken below the register resolution (the quantization,
±scale/2, as a rectangular u = q/√12). The fitted quantities are the per-phase magnitudes and
powers V, I, P and Q: totals, apparent power, power factor and line-to-line voltages are
derived from them inside the meter and would count the same information twice.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..model import Meter, Profile

FIT_QUANTITIES = ("v_ln", "i", "p", "q")
PHASES = ("A", "B", "C")
GAIN_KIND = {"v_ln": "v", "i": "i", "p": "p", "q": "q"}  # quantity -> accuracy-class kind
# Variance of the median of n normal draws over that of their mean, sigma^2/n (n = 1..10 from a
# Monte Carlo of 400 000 draws each, our computation; beyond 10 the asymptotic pi/2, common
# practice). An even n takes the mean of the middle two, as numpy does.
MEDIAN_VARIANCE = (1.0, 1.0, 1.345, 1.191, 1.437, 1.289, 1.473, 1.346, 1.499, 1.38)


def median_factor(n: int) -> float:
    """Standard uncertainty of a median of n draws, in units of sigma/sqrt(n)."""
    return math.sqrt(MEDIAN_VARIANCE[n - 1] if n <= len(MEDIAN_VARIANCE) else math.pi / 2.0)


@dataclass(frozen=True)
class StepConfig:
    """One switching configuration the fit uses; ``switches`` names every switch's state."""

    id: str
    switches: Mapping[str, str]
    captures: int = 1


@dataclass(frozen=True)
class Observations:
    """Rows of readings to fit (parallel arrays); ``step`` indexes ``steps``."""

    steps: tuple[StepConfig, ...]
    step: np.ndarray  # int index into steps
    meter: tuple[str, ...]
    quantity: tuple[str, ...]
    phase: tuple[str, ...]
    value: np.ndarray  # measured (median), primary SI
    sigma: np.ndarray  # standard uncertainty of the median from repeatability
    captures: np.ndarray  # how many captures the median is over

    def __len__(self) -> int:
        return len(self.value)

    def key(self, i: int) -> str:
        return (
            f"{self.steps[int(self.step[i])].id} {self.meter[i]} {self.quantity[i]}.{self.phase[i]}"
        )


def resolution_sigma(
    profile: Profile, meter: Meter, quantity: str, phase: str, value: float
) -> float:
    """Standard uncertainty of the register quantization of one reading, primary units."""
    try:
        spec = profile.meter_map(meter.id).spec(f"{quantity}.{phase}")
    except KeyError:
        return 0.0
    if spec.dtype in ("float32", "float64"):
        step = abs(value) * 2.0 ** (-23 if spec.dtype == "float32" else -52)
    else:
        step = abs(spec.scale)
    if meter.reports == "secondary":
        step *= {"v_ln": meter.vt_ratio, "i": meter.ct_ratio}.get(
            quantity, meter.vt_ratio * meter.ct_ratio
        )
    return step / math.sqrt(12.0)


@dataclass(frozen=True)
class RawRow:
    """One reading to fit before its uncertainty is pooled: the captures of one step."""

    step: int
    meter: str
    quantity: str
    phase: str
    samples: tuple[float, ...]


def pooled_observations(
    profile: Profile,
    steps: Sequence[StepConfig],
    rows: Sequence[RawRow],
    *,
    repeatability: float | None = None,
) -> Observations:
    """Medians with uncertainties from the pooled within-step scatter (see module docstring).

    The spread is pooled relative to each reading's scale (``_scales``).

    ``repeatability`` (relative standard deviation of one capture) replaces the scatter
    when given, and is the fallback when no reading of a meter and quantity repeats.
    """
    scale = _scales(rows)
    pooled: dict[tuple[str, str], list[float]] = {}
    for r, sc in zip(rows, scale, strict=True):
        s = np.asarray(r.samples, float)
        if len(s) >= 2 and sc > 0:
            pooled.setdefault((r.meter, r.quantity), []).append(float(np.var(s, ddof=1)) / sc**2)
    rel = {k: math.sqrt(float(np.mean(v))) for k, v in pooled.items()}
    value, sigma, caps = [], [], []
    for r, sc in zip(rows, scale, strict=True):
        s = np.asarray(r.samples, float)
        med = float(np.median(s))
        n = len(s)
        spread = repeatability if repeatability is not None else rel.get((r.meter, r.quantity))
        if spread is None:
            spread = DEFAULT_REPEATABILITY
        u = median_factor(n) * spread * sc / math.sqrt(n)
        res = resolution_sigma(profile, profile.meter(r.meter), r.quantity, r.phase, med)
        value.append(med)
        sigma.append(max(u, res, ABS_FLOOR[r.quantity]))
        caps.append(n)
    return Observations(
        steps=tuple(steps),
        step=np.array([r.step for r in rows], dtype=int),
        meter=tuple(r.meter for r in rows),
        quantity=tuple(r.quantity for r in rows),
        phase=tuple(r.phase for r in rows),
        value=np.array(value, float),
        sigma=np.array(sigma, float),
        captures=np.array(caps, dtype=int),
    )


def _scales(rows: Sequence[RawRow]) -> list[float]:
    """What a reading's spread is relative to: |V| and |I| themselves, and for P and Q the
    apparent power of the same phase (a meter's angle error moves Q by |S|·δφ, however small Q
    is)."""
    med = {(r.step, r.meter, r.quantity, r.phase): float(np.median(r.samples)) for r in rows}
    out = []
    for r in rows:
        own = abs(med[(r.step, r.meter, r.quantity, r.phase)])
        if r.quantity in ("p", "q"):
            p = med.get((r.step, r.meter, "p", r.phase), 0.0)
            q = med.get((r.step, r.meter, "q", r.phase), 0.0)
            own = max(own, math.hypot(p, q))
        out.append(own)
    return out


# Relative repeatability assumed when nothing repeats (our choice: 0.05 %, a bench meter's
# reading-to-reading spread at steady load).
DEFAULT_REPEATABILITY = 5e-4
# Absolute floors: a reading's uncertainty is never below these (1 mV, 0.1 mA, 1 mW/mvar).
ABS_FLOOR = {"v_ln": 1e-3, "i": 1e-4, "p": 1e-3, "q": 1e-3}


__all__ = [
    "FIT_QUANTITIES",
    "GAIN_KIND",
    "Observations",
    "RawRow",
    "StepConfig",
    "pooled_observations",
    "resolution_sigma",
]

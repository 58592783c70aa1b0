"""The synthetic record of CALIBRATION_NOTES §6.10, regenerated from its formula in every
COMTRADE variant and read back through ``comtrade`` 0.2.0 (no binaries are committed).

The record [C]: the exact series-RL response of the demo's source + L1 + L2 (R 0.31441,
X 0.62530 ohm) to a bolted three-phase fault at B2 from no load, E = 408 V line to line, phase
A switched at its voltage zero, 10 kHz, 2000 samples, fault at 40 ms; channels IA, IB, IC (A),
VA, VB, VC (V) and FAULT (status). Expected: Ik 336.5635 A, tau 6.3305 ms, R/X 0.502820,
|Zk| 0.699894 ohm, continuous peak 590.1924 A, sampled peak 590.184 A (int16), U_pre 408.000 V.
The notes give 590.192 A as the FLOAT32 sampled peak; we write the same sample instants in
every format and read 590.184 A from FLOAT32 as well (the sampled instants decide it, and the
continuous peak of the fit is 590.1924 A in every variant).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from meas.fault.comtrade_write import VARIANTS, write_comtrade
from meas.fault.record import read_record
from meas.fault.synth import as_record, fault_waves, phase_voltages
from meas.fault.waveform import analyse

Z_S = 408.0**2 / 600e3  # demo source: 600 kVA at 408 V, X/R 8
Z = complex(Z_S / math.sqrt(65) + 0.28, 8 * Z_S / math.sqrt(65) + 0.35)


def record_610(folder: Path, rev: str, fmt: str, cff: bool) -> Path:
    waves = fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 2000, 0.040)
    return write_comtrade(
        folder / f"r610_{rev}_{fmt}", as_record(waves, 50.0, 10_000.0, 0.040), rev, fmt, cff=cff
    )  # type: ignore[arg-type]


CASES = [(rev, fmt, False) for rev, fmt in VARIANTS] + [
    (rev, fmt, True) for rev, fmt in VARIANTS if rev == "2013"
]


@pytest.mark.parametrize(
    ("rev", "fmt", "cff"), CASES, ids=[f"{r}-{f}{'-cff' if c else ''}" for r, f, c in CASES]
)
def test_record_610(tmp_path: Path, rev: str, fmt: str, cff: bool) -> None:
    rec = read_record(record_610(tmp_path, rev, fmt, cff))
    assert (rec.revision, rec.data_format, rec.fs_hz, len(rec.t)) == (rev, fmt, 10_000.0, 2000)
    assert rec.current_names == ("IA", "IB", "IC") and rec.voltage_names == ("VA", "VB", "VC")
    a = analyse(rec)
    # integer formats quantise: int16 has 0.018 A per step (the notes read 336.564 A from it),
    # ASCII 0.006 A; FLOAT32 and int32 keep the value to its 4 stated decimals
    tol_ik = {"BINARY": 1e-3, "ASCII": 5e-4}.get(fmt, 5e-5)
    for ph in a.phases:
        assert ph.faulted
        assert ph.ik_fit_a == pytest.approx(336.5635, abs=tol_ik)
        assert ph.ik_dft_a == pytest.approx(336.5635, abs=tol_ik)
        assert ph.dft_after_5tau
        # tau (and R/X) within 3 of the fit's own standard uncertainties in every phase ...
        assert abs(ph.tau_s - 6.3305e-3) <= 3 * ph.tau_u_s + 5e-8
        assert abs(ph.r_x - 0.502820) <= 3 * ph.r_x_u + 5e-6
        assert ph.inception_s == pytest.approx(0.040, abs=1e-6)
    # ... and to the stated digits in phase A, switched at its voltage zero (the largest DC)
    assert a.phases[0].tau_s * 1e3 == pytest.approx(6.3305, abs=5e-5)
    assert a.phases[0].r_x == pytest.approx(0.502820, abs=5e-6)
    assert [p.alpha_deg for p in a.phases] == pytest.approx([0.0, -120.0, 120.0], abs=0.05)
    assert a.u_pre_ll_v == pytest.approx(408.000, abs=5e-4)
    zk = a.u_pre_ll_v / (math.sqrt(3) * a.phases[0].ik_dft_a)
    assert zk == pytest.approx(0.699894, abs=5e-6)
    sampled = max(p.peak_a for p in a.phases)
    assert sampled == pytest.approx(590.184, abs=1e-3)
    cont = max(p.peak_fit_a for p in a.phases)
    assert cont == pytest.approx(590.1924, abs=5e-4)
    bound = max(p.peak_sampling_bound_a for p in a.phases)
    assert 0 < cont - sampled <= bound  # the sampled peak lies within its stated bound


def test_sampling_bound_at_1_khz(tmp_path: Path) -> None:
    # CALIBRATION_NOTES §4.10: a 1 kHz recorder can miss the peak by up to 0.89 % [C]
    waves = fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 1000.0, 200, 0.040)
    a = analyse(
        read_record(
            write_comtrade(
                tmp_path / "slow", as_record(waves, 50.0, 1000.0, 0.040), "2013", "FLOAT32"
            )
        )
    )
    ph = max(a.phases, key=lambda p: p.peak_fit_a)
    assert ph.peak_sampling_bound_a / ph.peak_fit_a == pytest.approx(0.0089, abs=0.0005)
    assert ph.peak_fit_a - ph.peak_a <= ph.peak_sampling_bound_a + 1e-9


def test_secondary_values_are_made_primary_and_said_so(tmp_path: Path) -> None:
    waves = fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 2000, 0.040)
    path = write_comtrade(
        tmp_path / "sec",
        as_record(waves, 50.0, 10_000.0, 0.040, ct=(600.0, 1.0), vt=(400.0, 100.0)),
        "2013",
        "FLOAT32",
    )
    prim = read_record(path)
    raw = read_record(path, as_recorded=True)
    assert prim.values == "primary" and raw.values == "as recorded"
    assert prim.currents == pytest.approx(raw.currents * 600.0, rel=1e-12)
    assert prim.voltages == pytest.approx(raw.voltages * 4.0, rel=1e-12)  # type: ignore[operator]
    assert "IA: file values are secondary; multiplied by 600/1 = 600 to primary" in prim.notes
    assert any(n.startswith("IA: values taken as recorded (secondary") for n in raw.notes)
    assert analyse(prim).phases[0].ik_dft_a == pytest.approx(336.5635, abs=1e-3)


def test_a_fault_cleared_by_a_breaker(tmp_path: Path) -> None:
    # 2 s record with 10 A of load before the fault; every current is interrupted at 0.3 s.
    # The fault component still gives the §6.10 figures (the steady cycle is the last before
    # clearing), and the end of the fault is found within a half cycle.
    import dataclasses

    import numpy as np

    i_pre = [10 * np.exp(-1j * (0.3 + 2 * np.pi / 3 * k)) for k in range(3)]
    waves = fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 20_000, 0.04, i_pre=i_pre)
    cur = waves.currents.copy()
    cur[:, 3000:] = 0.0
    rec = as_record(dataclasses.replace(waves, currents=cur), 50.0, 10_000.0, 0.04)
    a = analyse(read_record(write_comtrade(tmp_path / "cleared", rec, "2013", "FLOAT32")))
    assert 0.29 <= a.fault_end_s <= 0.3
    assert [p.ik_dft_a for p in a.phases] == pytest.approx([336.5635] * 3, abs=1e-3)
    assert a.phases[0].tau_s * 1e3 == pytest.approx(6.3305, abs=5e-5)

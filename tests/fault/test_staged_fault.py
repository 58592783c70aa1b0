"""The simulated staged fault against the model: the whole campaign on the demo bench.

Expected values are the model's own (IEC 60909 Thevenin of the demo bench; I"k with
c = U_pre/Un equals U_pre/(sqrt3 |Z1|), common practice) and the RL closed form; the test
shows the comparison passes when the model is the bench and fails when the bench was built
differently and the model claims a calibration's tight uncertainty.
"""

from __future__ import annotations

import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from support.benches import DEMO

from meas.cautions import STAGED_FAULT_CAUTION
from meas.fault.compare import compare
from meas.fault.inputs import read_covariance
from meas.fault.record import read_record
from meas.fault.staged import as_built, stage_fault
from meas.fault.waveform import analyse
from meas.profile import load_profile
from meas.shortcircuit.uncertainty import nameplate_covariance
from tui.cli import main

PROFILE = load_profile(DEMO)


def _tight_cov_json(path: Path, rel: float = 0.005) -> Path:
    """A calibration-like result: the nameplate values, each known to ``rel`` (standard)."""
    names = nameplate_covariance(PROFILE).names
    values = nameplate_covariance(PROFILE).values
    path.write_text(
        json.dumps(
            {
                "parameters": list(names),
                "values": list(values),
                "std": [abs(v) * rel for v in values],
            }
        )
    )
    return path


def test_staged_fault_matches_the_model(tmp_path: Path) -> None:
    sf = stage_fault(PROFILE, "B2", tmp_path / "stage", alpha_deg=20.0, noise_pct=0.02, seed=3)
    a = analyse(read_record(sf.path))
    assert a.u_pre_ll_v == pytest.approx(sf.u_pre_ll_v, rel=2e-4)
    # pre-fault load current is removed by superposition: the fault component alone is U_pre/(sqrt3 |Z|)
    assert float(np.mean([p.ik_dft_a for p in a.phases])) == pytest.approx(sf.ik_a, rel=5e-4)
    assert a.phases[0].alpha_deg == pytest.approx(20.0, abs=0.1)
    comp = compare(a, PROFILE, "B2")
    assert comp.verdict == "pass", [(f.key, f.deviation_pct, f.verdict) for f in comp.figures]
    figs = {f.key: f for f in comp.figures}
    assert abs(figs["ikss"].deviation_pct) < 0.1 and abs(figs["r_x"].deviation_pct) < 0.5
    assert abs(figs["peak"].deviation_pct) < 0.1  # the exact RL peak at the measured angle
    assert comp.c_like == pytest.approx(sf.u_pre_ll_v / 400.0, rel=2e-4)
    assert comp.iec_min.ikss_a < comp.iec_max.ikss_a and comp.uncertainty_source.startswith(
        "nameplate"
    )


def test_a_bench_built_differently_fails_against_a_tight_model(tmp_path: Path) -> None:
    built = as_built(PROFILE, {"L2.r_ohm": 0.18, "L2.x_ohm": 0.12})  # as built: +50 % R, -20 % X
    sf = stage_fault(built, "B2", tmp_path / "stage", noise_pct=0.02)
    a = analyse(read_record(sf.path))
    tight = compare(
        a, PROFILE, "B2", covariance=read_covariance(_tight_cov_json(tmp_path / "cov.json"))
    )
    verdicts = {f.key: f.verdict for f in tight.figures}
    assert tight.verdict == "fail" and verdicts["r_x"] == "fail", verdicts
    assert tight.uncertainty_source == "calibration covariance"
    # with only the nameplate tolerances the same deviations are inside the model's uncertainty
    assert compare(a, PROFILE, "B2").figures[0].verdict == "pass"


def test_commands_end_to_end(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    stem = tmp_path / "staged"
    assert (
        main(
            [
                "fault",
                "simulate",
                str(DEMO),
                "--bus",
                "B2",
                "--out",
                str(stem),
                "--ct",
                "600/1",
                "--vt",
                "400/100",
                "--format",
                "2013-float32",
                "--cff",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert out.startswith(STAGED_FAULT_CAUTION) and "SIMULATION: wrote" in out
    cov = tmp_path / "cov.csv"
    names, values = nameplate_covariance(PROFILE).names, nameplate_covariance(PROFILE).values
    cov.write_text(
        "parameter,value,std\n"
        + "".join(f"{n},{v!r},{abs(v) * 0.01!r}\n" for n, v in zip(names, values, strict=True))
    )
    rc = main(
        [
            "fault",
            "check",
            str(stem.with_suffix(".cff")),
            "--profile",
            str(DEMO),
            "--bus",
            "B2",
            "--covariance",
            str(cov),
            "--out",
            str(tmp_path / "out"),
        ]
    )
    out = capsys.readouterr().out
    assert rc == 0, out
    assert out.startswith(STAGED_FAULT_CAUTION)
    assert "IA: file values are secondary; multiplied by 600/1 = 600 to primary" in out
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["verdict"] == "pass" and summary["caution"] == STAGED_FAULT_CAUTION
    assert summary["record"]["format"] == "FLOAT32" and summary["record"]["values"] == "primary"
    assert [c["key"] for c in summary["comparison"]] == ["ikss", "ik", "peak", "ip", "r_x", "zk"]
    assert summary["prediction"]["uncertainty_from"] == "calibration covariance"
    csv_lines = (tmp_path / "out" / "phases.csv").read_text().splitlines()
    assert csv_lines[0].startswith("phase,faulted,inception_ms,alpha_deg") and len(csv_lines) == 4
    svg = ET.parse(tmp_path / "out" / "waveform.svg").getroot()
    assert (
        svg.tag.endswith("svg") and len(svg.findall("{http://www.w3.org/2000/svg}path")) == 9
    )  # 3 records + 6 envelopes
    # as recorded (secondary) the currents are 600 times too small: the check fails, exit 1
    rc = main(
        [
            "fault",
            "check",
            str(stem.with_suffix(".cff")),
            "--profile",
            str(DEMO),
            "--bus",
            "B2",
            "--as-recorded",
            "--out",
            str(tmp_path / "raw"),
        ]
    )
    assert rc == 1 and "values taken as recorded" in capsys.readouterr().out


def test_predict_command(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["fault", "predict", str(DEMO), "--bus", "B2"]) == 0
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.startswith("B2"))
    assert line.split()[1:4] == ["1.10", "362.96", "634.87"]  # CALIBRATION_NOTES §6.7, in A
    assert (
        main(
            [
                "fault",
                "predict",
                str(DEMO),
                "--scale",
                "network",
                "--case",
                "min",
                "--kappa",
                "B",
                "--switch",
                "TIE=closed",
            ]
        )
        == 0
    )
    assert math.isfinite(
        float(
            next(ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("B3")).split()[
                2
            ]
        )
    )


@pytest.mark.parametrize("kind", ["2ph", "1ph"])
def test_line_to_line_and_earth_faults(tmp_path: Path, kind: str) -> None:
    # I"k2 = c Un/|2 Z1|, I"k1 = sqrt3 c Un/|2 Z1 + Z0| with c = U_pre/Un (IEC 60909-0 §8.2, §8.3)
    sf = stage_fault(PROFILE, "B3", tmp_path / kind, alpha_deg=10.0, kind=kind)  # type: ignore[arg-type]
    a = analyse(read_record(sf.path), voltage_angle=kind != "2ph")
    assert [p.name for p in a.faulted] == (["IB", "IC"] if kind == "2ph" else ["IA"])
    comp = compare(a, PROFILE, "B3", fault=kind)  # type: ignore[arg-type]
    figs = {f.key: f for f in comp.figures}
    assert comp.verdict == "pass", [(f.key, f.deviation_pct) for f in comp.figures]
    assert abs(figs["ikss"].deviation_pct) < 0.1 and abs(figs["zk"].deviation_pct) < 0.1
    assert abs(figs["peak"].deviation_pct) < 0.2


def test_fit_angle_agrees_with_the_voltage_angle(tmp_path: Path) -> None:
    sf = stage_fault(PROFILE, "B2", tmp_path / "s", alpha_deg=-35.0, noise_pct=0.0)
    rec = read_record(sf.path)
    by_v = [p.alpha_deg for p in analyse(rec).phases]
    by_fit = [p.alpha_deg for p in analyse(rec, voltage_angle=False).phases]
    assert by_fit == pytest.approx(by_v, abs=0.05) and by_v[0] == pytest.approx(-35.0, abs=0.05)


def test_a_record_at_network_scale(tmp_path: Path) -> None:
    # the demo stands for 33 kV: voltages x vs, currents x ps/vs, impedances x vs^2/ps (meas.bases)
    from meas.fault.comtrade_write import write_comtrade
    from meas.fault.synth import as_record, fault_waves, phase_voltages

    vs, ps = 33000.0 / 400.0, 333.3333333
    z_bench = complex(0.31441219676443, 0.62529757411544)  # Z1 at B2 (CALIBRATION_NOTES §4.9)
    waves = fault_waves(
        phase_voltages(408.0 * vs, 0.0), z_bench * vs**2 / ps, 50.0, 10_000.0, 2000, 0.04
    )
    rec = read_record(
        write_comtrade(tmp_path / "net", as_record(waves, 50.0, 10_000.0, 0.04), "2013", "FLOAT32")
    )
    comp = compare(analyse(rec), PROFILE, "B2", scale="network")
    figs = {f.key: f for f in comp.figures}
    assert comp.un_v == 33000.0 and comp.c_like == pytest.approx(408.0 / 400.0, rel=1e-6)
    assert figs["ikss"].predicted == pytest.approx(336.5635 * ps / vs, rel=1e-5)  # §6.10 Ik, scaled
    assert abs(figs["ikss"].deviation_pct) < 1e-3 and abs(figs["zk"].deviation_pct) < 1e-3
    assert comp.verdict == "pass"


def test_simulated_record_refuses_what_it_does_not_model(tmp_path: Path) -> None:
    from meas.errors import BenchwalkError

    with pytest.raises(BenchwalkError, match="not a parameter of the network model: L9.r_ohm"):
        as_built(PROFILE, {"L9.r_ohm": 0.1})
    with pytest.raises(BenchwalkError, match="not live"):
        stage_fault(PROFILE, "B3", tmp_path / "x", switch_states={"SW3": "open"})


def test_predict_with_a_covariance(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    cov = _tight_cov_json(tmp_path / "cov.json", rel=0.01)
    assert main(["fault", "predict", str(DEMO), "--bus", "B2", "--covariance", str(cov)]) == 0
    line = next(ln for ln in capsys.readouterr().out.splitlines() if 'u(I"k)' in ln)
    u = float(line.split()[2])
    assert 0.5 < u < 5.0  # about 1 % of 363 A from 1 % parameters (delta method)


def test_superposition_check_of_the_notes(tmp_path: Path) -> None:
    # CALIBRATION_NOTES §6.11 [C]: POC step C3 (the demo's normal state), true parameters, fault
    # at B2: V_pre(B2) = 391.709 V and V_pre/(sqrt3 |Zk|) without loads = 323.125 A. The POC is
    # balanced, so load bank 2 gets its total (5 kW, 1.6 kvar) spread evenly, as there.
    import dataclasses

    from meas.model import LoadParams

    def balanced(b):  # type: ignore[no-untyped-def]
        if b.id == "LD2" and isinstance(b.model, LoadParams):
            return dataclasses.replace(
                b, model=dataclasses.replace(b.model, p_w=5000.0, q_var=1600.0)
            )
        return b

    poc = dataclasses.replace(PROFILE, branches=tuple(balanced(b) for b in PROFILE.branches))
    sf = stage_fault(poc, "B2", tmp_path / "c3", noise_pct=0.0, data_format="FLOAT32")
    assert sf.u_pre_ll_v == pytest.approx(391.709, abs=5e-4) and sf.ik_a == pytest.approx(
        323.125, abs=5e-4
    )
    a = analyse(read_record(sf.path))
    assert a.u_pre_ll_v == pytest.approx(391.709, abs=1e-3)
    assert [p.ik_dft_a for p in a.phases] == pytest.approx([323.125] * 3, abs=1e-3)

"""Bad records give one line naming the file and the problem, and exit 2 (never a traceback).

Records are written by benchwalk's own writer and then damaged the way field files are: a
channel that is not there, a channel in the wrong unit, a .dat cut short, a .cfg whose sample
count disagrees with the data (common practice: what breaks a COMTRADE import).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest
from support.benches import DEMO

from meas.fault.comtrade_write import write_comtrade
from meas.fault.synth import as_record, fault_waves, phase_voltages
from tui.cli import main

Z = complex(0.31441, 0.62530)


def _record(
    folder: Path, fmt: str = "BINARY", rev: str = "1999", cff: bool = False, unit_ia: str = "A"
) -> Path:
    rec = as_record(
        fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 2000, 0.04), 50.0, 10_000.0, 0.04
    )
    if unit_ia != "A":
        rec = dataclasses.replace(
            rec, analogs=(dataclasses.replace(rec.analogs[0], unit=unit_ia), *rec.analogs[1:])
        )
    return write_comtrade(folder / "rec", rec, rev, fmt, cff=cff)  # type: ignore[arg-type]


def _check(capsys: pytest.CaptureFixture[str], path: Path, *extra: str) -> str:
    rc = main(["fault", "check", str(path), "--profile", str(DEMO), "--bus", "B2", *extra])
    err = capsys.readouterr().err.strip()
    assert rc == 2
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    assert err.startswith("benchwalk fault: ")
    return err


def test_missing_channel(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path)
    err = _check(capsys, p, "--currents", "IA,IB,IX")
    assert (
        f"{p}: no analog channel 'IX' for the currents; the record has IA, IB, IC, VA, VB, VC"
        in err
    )


def test_wrong_units(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path, unit_ia="kV")
    assert f"{p}: channel 'IA' has unit 'kV'; currents must be in A or kA" in _check(
        capsys, p, "--currents", "IA,IB,IC"
    )
    p = _record(tmp_path)
    assert f"{p}: channel 'IA' has unit 'A'; voltages must be in V or kV" in _check(
        capsys, p, "--voltages", "IA,VB,VC"
    )


def test_truncated_binary_dat(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path)
    dat = p.with_suffix(".dat")
    dat.write_bytes(dat.read_bytes()[:-7])
    assert "the .dat ends inside a sample" in _check(capsys, p) and str(p) in _check(capsys, p)


def test_truncated_ascii_dat(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path, "ASCII")
    dat = p.with_suffix(".dat")
    dat.write_text("\r\n".join(dat.read_text().splitlines()[:1500]) + "\r\n")
    assert f"{p}: the .cfg states 2000 samples but the data holds 1500 rows" in _check(capsys, p)


def test_truncated_cff(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path, "FLOAT32", "2013", cff=True)
    p.write_bytes(p.read_bytes()[:-4000])
    assert "the DAT section states" in _check(capsys, p)


@pytest.mark.parametrize("stated", [2500, 1500])
def test_cfg_lies_about_the_sample_count(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], stated: int
) -> None:
    p = _record(tmp_path, "BINARY32", "2013")
    p.write_bytes(p.read_bytes().replace(b"10000,2000", f"10000,{stated}".encode()))
    assert f"{p}: the .cfg states {stated} samples but the .dat holds 2000" in _check(capsys, p)


def test_not_a_record_and_no_data_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    p = _record(tmp_path)
    p.with_suffix(".dat").unlink()
    assert "no data file rec.dat beside it" in _check(capsys, p)
    junk = tmp_path / "junk.cfg"
    junk.write_text("this is not\na record\n")
    assert "not a readable COMTRADE record" in _check(capsys, junk)
    assert "no such record" in _check(capsys, tmp_path / "absent.cfg")


def test_a_record_without_a_fault(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    waves = fault_waves(
        phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 2000, 10.0
    )  # fault after the end
    p = write_comtrade(
        tmp_path / "quiet", as_record(waves, 50.0, 10_000.0, 0.04), "2013", "FLOAT32"
    )
    assert "no fault current found" in _check(capsys, p)


def test_a_sample_missing_inside_the_dat(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # int16 rows are 22 bytes here (not whole 32-bit words): sample numbers still checked
    p = _record(tmp_path)
    dat = p.with_suffix(".dat")
    data = bytearray(dat.read_bytes())
    data[22 * 700 : 22 * 700 + 4] = (9999).to_bytes(4, "little")
    dat.write_bytes(bytes(data))
    assert f"{p}: the sample numbers in the .dat are not consecutive" in _check(capsys, p)


def test_a_fault_inside_the_first_cycle(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    waves = fault_waves(phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 2000, 0.005)
    p = write_comtrade(
        tmp_path / "early", as_record(waves, 50.0, 10_000.0, 0.005), "2013", "FLOAT32"
    )
    assert "needs one full cycle recorded before the fault" in _check(capsys, p)


def test_line_to_line_voltage_channels_are_not_taken_for_phases(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    p = _record(tmp_path)
    text = p.read_bytes().decode("ascii")
    for ph in ("A", "B", "C"):  # relabel the voltage channels' phases as line to line
        text = text.replace(f",V{ph},{ph},,V,", f",V{ph},{ph}{'BCA'['ABC'.index(ph)]},,V,")
    p.write_text(text, newline="")
    assert "needs them (--voltages)" in _check(capsys, p)


def test_several_sampling_rates_and_a_foreign_frequency(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    p = _record(tmp_path, "FLOAT32", "2013")
    good = p.read_bytes().decode("ascii")
    assert "\r\n1\r\n10000,2000\r\n" in good and "\r\n50\r\n1\r\n" in good
    p.write_text(
        good.replace("\r\n1\r\n10000,2000\r\n", "\r\n2\r\n10000,1000\r\n5000,2000\r\n"), newline=""
    )
    assert f"{p}: the record has 2 sampling rates" in _check(capsys, p)
    p.write_text(good.replace("\r\n50\r\n1\r\n", "\r\n60\r\n1\r\n"), newline="")
    assert "the record is at 60 Hz but the profile" in _check(capsys, p)

"""Register maps from CSV tables: the demo's corvid-i32 map (invented) written as a CSV file
loads to exactly the registers its TOML table gives; CSV problems name the file and line; the
CSV travels with the profile (sources, digest) so a dataset rebuilds the same bench."""

from __future__ import annotations

import csv
import io
import re
import shutil
from pathlib import Path

import pytest

from meas.dataset.derived import profile_from_texts
from meas.errors import ProfileError
from meas.profile import load_profile

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "profiles_demo" / "feeder_bench.toml"
MAP = "corvid-i32"


def _csv_of(profile, map_id: str, extra_column: bool = True) -> str:
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["quantity", "address", "type", "scale", "description"])
    w.writerow(["# invented map, written by the test"])
    for s in profile.maps[map_id].registers:
        w.writerow(
            [s.key, s.address, s.dtype, repr(s.scale), f"{s.key} register" if extra_column else ""]
        )
    return buf.getvalue()


def _with_csv(folder: Path, csv_text: str) -> Path:
    """The demo profile with the map's [registers] table replaced by csv = "maps/corvid.csv"."""
    shutil.copytree(DEMO.parent, folder)
    toml = (folder / DEMO.name).read_text()
    block = re.search(rf"\[maps\.{MAP}\.registers\]\n(?:(?!\[).*\n)*", toml)
    assert block is not None
    toml = toml.replace(block.group(0), "", 1).replace(
        f"[maps.{MAP}]\n", f'[maps.{MAP}]\ncsv = "maps/corvid.csv"\n', 1
    )
    (folder / DEMO.name).write_text(toml)
    (folder / "maps").mkdir()
    (folder / "maps" / "corvid.csv").write_text(csv_text)
    return folder / DEMO.name


def test_csv_map_loads_the_same_registers(tmp_path):
    demo = load_profile(DEMO)
    path = _with_csv(tmp_path / "bench", _csv_of(demo, MAP))
    got = load_profile(path)
    assert got.maps[MAP].registers == demo.maps[MAP].registers
    # the map's defaults (kind, word order) filled the columns the CSV left out
    assert {s.kind for s in got.maps[MAP].registers} == {"holding"}
    assert "maps/corvid.csv" in [s.name for s in got.sources]
    # a dataset rebuilds the bench from the journalled sources alone
    rebuilt = profile_from_texts([(s.name, s.text) for s in got.sources])
    assert rebuilt is not None and rebuilt.maps[MAP].registers == demo.maps[MAP].registers


def test_csv_changes_change_the_profile_digest(tmp_path):
    demo = load_profile(DEMO)
    a = load_profile(_with_csv(tmp_path / "a", _csv_of(demo, MAP)))
    b = load_profile(_with_csv(tmp_path / "b", _csv_of(demo, MAP).replace(",1000,", ",1200,", 1)))
    assert a.sha256 != b.sha256


def test_csv_problems_name_file_and_line(tmp_path):
    demo = load_profile(DEMO)
    text = _csv_of(demo, MAP).splitlines()
    text[3] = text[3].replace(text[3].split(",")[1], "twelve", 1)  # line 4: a bad address
    path = _with_csv(tmp_path / "bench", "\n".join(text) + "\n")
    with pytest.raises(ProfileError) as err:
        load_profile(path)
    lines = [str(p) for p in err.value.problems]
    assert any(x.startswith("maps/corvid.csv:4:") and "twelve" in x for x in lines), lines


def test_csv_outside_the_profile_folder_is_refused(tmp_path):
    demo = load_profile(DEMO)
    path = _with_csv(tmp_path / "bench", _csv_of(demo, MAP))
    toml = path.read_text().replace('csv = "maps/corvid.csv"', 'csv = "../../etc/passwd"')
    path.write_text(toml)
    with pytest.raises(ProfileError) as err:
        load_profile(path)
    assert any("not inside the profile's folder" in str(p) for p in err.value.problems)

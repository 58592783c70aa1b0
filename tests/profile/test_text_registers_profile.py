"""Text registers in the profile: identification keys take type "string" and a count in
registers, from a TOML map or a CSV map; a string register under a measured quantity, or an
identification key without text, is a lint error naming the file and line. The demo maps are
invented."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

from meas.profile import check_profile, load_profile
from meas.register_map import TextSpec

DEMO = Path(__file__).resolve().parents[2] / "profiles_demo" / "feeder_bench.toml"


def _edited(tmp_path: Path, old: str, new: str) -> Path:
    folder = tmp_path / "bench"
    shutil.copytree(DEMO.parent, folder)
    path = folder / DEMO.name
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))
    return path


def _line_of(path: Path, fragment: str) -> int:
    return next(i for i, ln in enumerate(path.read_text().splitlines(), 1) if fragment in ln)


def _problems(path: Path) -> list[str]:
    profile, problems = check_profile(path)
    assert profile is None
    return [str(p) for p in problems]


def test_demo_maps_carry_a_serial_number_register():
    demo = load_profile(DEMO)
    lumen = demo.maps["lumen-f32"]
    assert lumen.text == (TextSpec("serial", "input", 200, 8),)  # kind from the map's defaults
    assert all(s.key != "serial" for s in lumen.registers)  # never a numeric reading


def test_string_type_on_a_measured_quantity_is_an_error_at_its_line(tmp_path):
    bad = '"v_ln.A" = { address = 0, type = "string", count = 2 }'
    path = _edited(tmp_path, '"v_ln.A" = { address = 0 }', bad)
    problems = _problems(path)
    line = _line_of(path, bad)
    hit = [p for p in problems if "measured quantity" in p]
    assert len(hit) == 1, problems
    assert hit[0].startswith(f"{path}:{line}:") or f"{path.name}:{line}:" in hit[0], hit[0]
    assert "serial" in hit[0]  # says what strings are for
    assert [p for p in problems if f":{line}:" in p] == hit  # one line for the one mistake


def test_identification_key_needs_string_type_and_count(tmp_path):
    old = 'serial = { address = 200, type = "string", count = 8 }'
    path = _edited(tmp_path, old, 'serial = { address = 200, type = "float32" }')
    assert any('is text: give type = "string"' in p for p in _problems(path))
    path2 = _edited(tmp_path / "b", old, 'serial = { address = 200, type = "string" }')
    problems = _problems(path2)
    line = _line_of(path2, 'serial = { address = 200, type = "string" }')
    hit = [p for p in problems if "needs count" in p]
    assert hit and f":{line}:" in hit[0], problems


def test_text_register_overlapping_a_quantity_is_an_error(tmp_path):
    old = 'serial = { address = 200, type = "string", count = 8 }'
    path = _edited(tmp_path, old, 'serial = { address = 102, type = "string", count = 8 }')
    assert any("overlap" in p and "e_imp.T" in p for p in _problems(path)), _problems(path)


def test_csv_map_row_with_a_count_is_a_text_register(tmp_path):
    folder = tmp_path / "bench"
    shutil.copytree(DEMO.parent, folder)
    toml = (folder / DEMO.name).read_text()
    block = re.search(r"\[maps\.wren-i16\.registers\]\n(?:(?!\[).*\n)*", toml)
    assert block is not None
    toml = toml.replace(block.group(0), "", 1).replace(
        "[maps.wren-i16]\n", '[maps.wren-i16]\ncsv = "maps/wren.csv"\n', 1
    )
    (folder / DEMO.name).write_text(toml)
    (folder / "maps").mkdir()
    rows = ["quantity,address,type,count,scale,unit"]
    rows += [f"v_ln.{ph},{k},uint16,,0.01,V" for k, ph in enumerate("ABC")]
    rows += [f"i.{ph},{6 + k},uint16,,0.001,A" for k, ph in enumerate("ABC")]
    rows += ["serial,40,string,6,,", "firmware,46,string,2,,"]
    (folder / "maps" / "wren.csv").write_text("\n".join(rows) + "\n")
    got = load_profile(folder / DEMO.name)
    assert got.maps["wren-i16"].text == (
        TextSpec("serial", "holding", 40, 6),
        TextSpec("firmware", "holding", 46, 2),
    )
    # a string row under a quantity in the CSV names the CSV file and its line
    (folder / "maps" / "wren.csv").write_text("\n".join([*rows, "p.A,60,string,2,,"]) + "\n")
    problems = _problems(folder / DEMO.name)
    hit = [p for p in problems if "measured quantity" in p]
    assert hit and f"wren.csv:{len(rows) + 1}:" in hit[0], problems


def test_a_map_entry_that_is_no_table_says_what_it_should_look_like_at_its_line(tmp_path):
    old = 'serial = { address = 200, type = "string", count = 8 }'
    for wrong, like in (
        ('"v_ln.A" = "zero"', "{ address = 0 }"),
        ('serial = "200"', '{ address = 0, type = "string", count = 8 }'),
    ):
        was = '"v_ln.A" = { address = 0 }' if wrong.startswith('"v_ln') else old
        path = _edited(tmp_path / wrong[:6].strip('"= '), was, wrong)
        line = _line_of(path, wrong)
        hit = [p for p in _problems(path) if f":{line}:" in p]
        assert len(hit) == 1 and f"expected an inline table like {like}, got" in hit[0], hit

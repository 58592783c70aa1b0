"""Bad input from the outside world: fuzzed dataset folders and malformed fault strings.

A dataset folder may come from anyone, edited by hand or damaged in transit. Whatever it
holds, ``benchwalk check`` and ``benchwalk report`` (through ``tui.cli.main``) answer with
their normal result or exit 2 with one line, and never a traceback. The fuzzer also "re-seals"
its damage (new sha256 and size in datapackage.json, as a careless editor or a hostile sender
would) so the damage gets past the integrity check into the code that reads the tables.
The session data is invented for the test (tests/support/invented_bench.build_session).
"""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.benches import write_bench  # noqa: E402
from support.invented_bench import build_session  # noqa: E402

from meas.dataset.export import export_session  # noqa: E402
from meas.dataset.schema import TABLES  # noqa: E402
from meas.errors import BenchwalkError  # noqa: E402
from meas.sim.faults import parse_fault  # noqa: E402
from tui import cli  # noqa: E402


@pytest.fixture(scope="module")
def dataset(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("bad")
    return export_session(build_session(folder, n_snapshots=6, n_meters=2), folder / "ds")


def _sha(p: Path) -> str:
    return "sha256:" + hashlib.sha256(p.read_bytes()).hexdigest()


def reseal(folder: Path) -> None:
    """Make datapackage.json agree with the files again (hashes and sizes)."""
    dp = folder / "datapackage.json"
    pkg = json.loads(dp.read_text())
    for r in pkg["resources"]:
        for entry in (r, r.get("benchwalk:parquet", {})):
            p = folder / entry["path"]
            if p.is_file():
                entry["hash"], entry["bytes"] = _sha(p), p.stat().st_size
    for entry in pkg["benchwalk"]["profile_files"]:
        p = folder / entry["path"]
        if p.is_file():
            entry["hash"] = _sha(p)
    dp.write_text(json.dumps(pkg))


json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=True)
    | st.text(max_size=12)
    | st.sampled_from(["/etc/passwd", "../../x", "data/measurements.csv", "a\x00b", "x" * 5000]),
    lambda kids: (
        st.lists(kids, max_size=3) | st.dictionaries(st.text(max_size=6), kids, max_size=3)
    ),
    max_leaves=8,
)


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def mutate_json(folder: Path, data) -> str:
    dp = folder / "datapackage.json"
    pkg = json.loads(dp.read_text())
    paths = [p for p in _paths(pkg) if p]
    path = data.draw(st.sampled_from(paths), label="json path")
    parent = pkg
    for k in path[:-1]:
        parent = parent[k]
    if data.draw(st.booleans(), label="delete"):
        del parent[path[-1]]
    else:
        parent[path[-1]] = data.draw(json_values, label="value")
    dp.write_text(json.dumps(pkg))
    return f"json {path}"


HOSTILE_PROFILES = [
    "not toml at all [[[",
    "x = " + "[" * 3000 + "]" * 3000,
    "[bench]\nname = 1\n",
    '[sequence]\nfile = "/etc/passwd"\n',
    "",
    '[bench]\nname = "' + "A" * 100_000 + '"\n',
]


def mutate_file(folder: Path, data) -> str:
    files = sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())
    rel = data.draw(st.sampled_from(files), label="file")
    p = folder / rel
    how = data.draw(
        st.sampled_from(["delete", "truncate", "garbage", "directory", "symlink-out", "profile"]),
        label="how",
    )
    raw = p.read_bytes()
    if how == "delete":
        p.unlink()
    elif how == "truncate":
        p.write_bytes(raw[: data.draw(st.integers(0, max(0, len(raw) - 1)), label="keep")])
    elif how == "garbage":
        p.write_bytes(data.draw(st.binary(max_size=64), label="bytes"))
    elif how == "directory":
        p.unlink()
        p.mkdir()
    elif how == "symlink-out":
        p.unlink()
        p.symlink_to("/etc/passwd")
    else:
        (folder / "profile" / "profile.toml").write_text(
            data.draw(st.sampled_from(HOSTILE_PROFILES), label="toml")
        )
    if rel != "datapackage.json" and data.draw(st.booleans(), label="reseal"):
        reseal(folder)
    return f"file {rel} {how}"


def mutate_table(folder: Path, data) -> str:
    """A table rewritten with one column's values replaced, types kept or not, then re-sealed."""
    name = data.draw(st.sampled_from(sorted(TABLES)), label="table")
    p = folder / "data" / f"{name}.parquet"
    t = pq.read_table(p)
    col = data.draw(st.sampled_from(t.column_names), label="column")
    n = t.num_rows
    kind = data.draw(
        st.sampled_from(["nulls", "junk-text", "wrong-type", "extremes", "drop-rows"]), label="kind"
    )
    field = t.schema.field(col)
    if kind == "drop-rows":
        t = t.slice(0, data.draw(st.integers(0, max(0, n - 1)), label="rows"))
    else:
        if kind == "nulls":
            arr = pa.nulls(n, field.type)
        elif kind == "junk-text" and pa.types.is_string(field.type):
            arr = pa.array(
                data.draw(st.lists(st.text(max_size=5), min_size=n, max_size=n), label="text"),
                pa.string(),
            )
        elif kind == "extremes" and pa.types.is_integer(field.type):
            arr = pa.array([2**62, -(2**62), 0] * (n // 3) + [0] * (n % 3), field.type)
        elif kind == "extremes" and pa.types.is_floating(field.type):
            arr = pa.array(
                [float("nan"), float("inf"), -1e308] * (n // 3) + [0.0] * (n % 3), field.type
            )
        else:
            arr = pa.array([str(i) for i in range(n)], pa.string())  # wrong type for most columns
        t = t.set_column(t.column_names.index(col), pa.field(col, arr.type), arr)
    pq.write_table(t, p)
    reseal(folder)
    return f"table {name}.{col} {kind}"


def _answer(capsys, argv: list[str]) -> None:
    capsys.readouterr()
    rc = cli.main(argv)  # an uncaught exception here fails the test: that is the traceback case
    err = capsys.readouterr().err
    assert "Traceback" not in err
    if rc == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"benchwalk {argv[0]}: "), lines
    else:
        assert rc in (0, 1), rc


@settings(
    max_examples=45, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@pytest.mark.slow
@given(data=st.data())
def test_fuzzed_dataset_check_and_report_answer_in_one_line(
    dataset, tmp_path_factory, capsys, data
):
    copy = tmp_path_factory.mktemp("fz") / "ds"
    shutil.copytree(dataset, copy, symlinks=True)
    what = data.draw(st.sampled_from([mutate_json, mutate_file, mutate_table]), label="mutation")(
        copy, data
    )
    note = f"mutation: {what}"
    try:
        _answer(capsys, ["check", str(copy)])
        _answer(capsys, ["report", str(copy), "--out", str(copy.parent / "r.html")])
    except AssertionError as exc:
        raise AssertionError(f"{note}: {exc}") from exc


def test_untouched_dataset_checks_and_reports(dataset, tmp_path, capsys):
    """The fuzz baseline: the unmutated folder is accepted (exit 0 or 1, not 2)."""
    for argv in (
        ["check", str(dataset)],
        ["report", str(dataset), "--out", str(tmp_path / "r.html")],
    ):
        capsys.readouterr()
        assert cli.main(argv) in (0, 1), capsys.readouterr().err
    assert (tmp_path / "r.html").is_file()


def test_descriptor_paths_outside_the_folder_are_refused(dataset, tmp_path, capsys):
    copy = tmp_path / "ds"
    shutil.copytree(dataset, copy)
    secret = tmp_path / "secret.toml"
    secret.write_text("[bench]\nname = 'not yours'\n")
    pkg = json.loads((copy / "datapackage.json").read_text())
    pkg["benchwalk"]["profile_files"][0] = {
        "path": str(secret),
        "hash": _sha(secret),
    }  # hash agrees
    (copy / "datapackage.json").write_text(json.dumps(pkg))
    capsys.readouterr()
    assert cli.main(["check", str(copy)]) == 2
    err = capsys.readouterr().err
    assert "not a path inside the dataset folder" in err and err.count("\n") == 1


# ---------------------------------------------------------------- --fault strings


@settings(max_examples=300, deadline=None)
@given(
    text=st.one_of(
        st.text(max_size=24),
        st.lists(
            st.sampled_from(
                [
                    "ct-reversed",
                    "slow",
                    "exception",
                    "offline",
                    "M1",
                    "B",
                    "1.5",
                    "-1",
                    "nan",
                    "inf",
                    "1e999",
                    "A-A",
                    "",
                    " ",
                    "12",
                    "x",
                ]
            ),
            max_size=5,
        ).map(":".join),
    )
)
def test_parse_fault_is_a_fault_or_one_clear_line(text):
    try:
        fault = parse_fault(text)
    except BenchwalkError as exc:
        assert "\n" not in str(exc) and str(exc).startswith("fault ")
        return
    assert fault.kind and fault.meter  # whatever parsed is complete
    assert parse_fault(fault.text) == fault  # and its text form reads back the same


MALFORMED = [
    "",
    ":",
    "ct-reversed",
    "ct-reversed:M1",
    "ct-reversed:M1:Q",
    "slow:M1:-2",
    "slow:M1:nan",
    "exception:M1:7",
    "offline:M1:extra",
    "phases-swapped:M1:A-A",
    "vt-ratio:M1:1e999",
    "nonsense:M1",
    "ct-reversed:M99:B",
    "frozen:",
    "\x00:M1",
    "slow:M1:" + "9" * 400,
]


@pytest.mark.parametrize("fault", MALFORMED)
def test_malformed_fault_on_the_command_line_is_one_line_exit_2(fault, tmp_path, capsys):
    profile = write_bench(tmp_path / "bench")
    for argv in (
        ["sim", str(profile), "--free-ports", "--fault", fault],
        [
            "demo",
            "--headless",
            "--profile",
            str(profile),
            "--sessions",
            str(tmp_path / "s"),
            "--out",
            str(tmp_path / "out"),
            "--fault",
            fault,
        ],
    ):
        capsys.readouterr()
        assert cli.main(argv) == 2
        out = capsys.readouterr()
        lines = out.err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"benchwalk {argv[0]}: fault "), lines
    assert not (tmp_path / "s").exists() or not list(
        (tmp_path / "s").iterdir()
    )  # no session was started

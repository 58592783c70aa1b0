"""No command deletes or replaces what it did not create (real files, the real command line).

``export --overwrite`` replaces only a benchwalk dataset; ``report`` replaces only an earlier
benchwalk report of the same format; an empty file given as the session stays empty; output
problems are found before a session starts; a killed swap's leftovers are cleaned.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from support.invented_bench import build_session

from meas.dataset.export import export_session
from meas.dataset.read import verify_dataset
from meas.errors import BenchwalkError
from tui import cli

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def journal(tmp_path_factory) -> Path:
    return build_session(tmp_path_factory.mktemp("out"), n_snapshots=6, n_meters=2)


def _tree(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
    }


def _run(capsys, *argv: str) -> tuple[int, str]:
    capsys.readouterr()
    code = cli.main(list(argv))
    return code, capsys.readouterr().err


def test_overwrite_of_a_folder_that_is_not_a_dataset_is_refused_contents_intact(
    journal, tmp_path, capsys
):
    mine = tmp_path / "measurements-2026"
    (mine / "sub").mkdir(parents=True)
    (mine / "notes.txt").write_text("field notes")
    (mine / "sub" / "photo.jpg").write_bytes(os.urandom(256))
    # even a folder with a datapackage.json that is not benchwalk's
    (mine / "datapackage.json").write_text('{"name": "someone else", "resources": []}')
    before = _tree(mine)
    code, err = _run(capsys, "export", str(journal), "--out", str(mine), "--overwrite")
    assert code == 2 and err.count("\n") == 1 and "not a benchwalk dataset" in err
    assert _tree(mine) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["measurements-2026"]


def test_overwrite_replaces_a_benchwalk_dataset(journal, tmp_path, capsys):
    ds = export_session(journal, tmp_path / "ds")
    (ds / "stray.txt").write_text("x")  # a dataset edited by hand is still a dataset
    code, _ = _run(capsys, "export", str(journal), "--out", str(ds), "--overwrite")
    assert code == 0 and not (ds / "stray.txt").exists()
    verify_dataset(ds)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ds"]  # no .ds.old-PID left


def test_overwrite_onto_a_file_is_refused_and_leaves_nothing_behind(journal, tmp_path, capsys):
    for text in ("keep me", ""):
        f = tmp_path / "target"
        f.write_text(text)
        code, err = _run(capsys, "export", str(journal), "--out", str(f), "--overwrite")
        assert code == 2 and "is a file" in err
        assert f.read_text() == text
        assert sorted(p.name for p in tmp_path.iterdir()) == ["target"]


def test_an_empty_file_given_as_the_session_stays_empty(tmp_path, capsys):
    empty = tmp_path / "oops.sqlite"
    empty.touch()
    code, err = _run(capsys, "export", str(empty), "--out", str(tmp_path / "ds"))
    assert code == 2 and err.count("\n") == 1 and "an empty file" in err
    assert empty.stat().st_size == 0 and sorted(p.name for p in tmp_path.iterdir()) == [
        "oops.sqlite"
    ]


def test_output_paths_are_checked_against_the_inputs(journal, tmp_path, capsys):
    before = journal.read_bytes()
    for out in (journal, journal.parent, journal.parent.parent):
        code, err = _run(capsys, "export", str(journal), "--out", str(out), "--overwrite")
        assert code == 2 and "session journal" in err, err
    assert journal.read_bytes() == before
    ds = export_session(journal, tmp_path / "ds")
    for out in (ds / "r.html", ds / "data" / "x.html"):
        code, err = _run(capsys, "report", str(ds), "--out", str(out))
        assert code == 2 and "inside the dataset folder" in err
    verify_dataset(ds)


def test_report_replaces_only_its_own_earlier_report(journal, tmp_path, capsys):
    ds = export_session(journal, tmp_path / "ds")
    html = tmp_path / "r.html"
    code, _ = _run(capsys, "report", str(ds), "--out", str(html))
    assert code == 0 and html.is_file() and html.with_suffix(".md").is_file()
    # --out naming the Markdown would write the HTML over it
    code, err = _run(capsys, "report", str(ds), "--out", str(tmp_path / "r.md"))
    assert code == 2 and "give the HTML file name" in err
    # an earlier report of ours is replaced
    code, _ = _run(capsys, "report", str(ds), "--out", str(html))
    assert code == 0
    # someone else's page, or a Markdown file beside it that is not ours, is never replaced
    theirs = tmp_path / "index.html"
    theirs.write_text("<html><title>My notes</title></html>")
    code, err = _run(capsys, "report", str(ds), "--out", str(theirs))
    assert code == 2 and "not a benchwalk report" in err
    assert theirs.read_text() == "<html><title>My notes</title></html>"
    (tmp_path / "r2.md").write_text("# My notes\n")
    code, err = _run(capsys, "report", str(ds), "--out", str(tmp_path / "r2.html"))
    assert code == 2 and "r2.md" in err and not (tmp_path / "r2.html").exists()
    assert (tmp_path / "r2.md").read_text() == "# My notes\n"


def test_leftovers_of_a_killed_swap_are_cleaned_by_the_next_export(journal, tmp_path):
    """A swap killed between its two renames leaves ``.NAME.old-PID`` (the only copy while NAME
    is missing); once NAME is written again the stale copy goes."""
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    target = tmp_path / "ds"
    old = export_session(journal, tmp_path / "x")
    os.rename(old, tmp_path / f".ds.old-{dead.pid}")
    partial = tmp_path / f".ds.partial-{dead.pid}"
    (partial / "data").mkdir(parents=True)
    export_session(journal, target)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["ds"]
    verify_dataset(target)


@pytest.mark.slow
def test_demo_output_problems_are_found_before_the_session_starts(tmp_path):
    a_file = tmp_path / "out"
    a_file.write_text("not a folder")
    sessions = tmp_path / "sessions"
    r = subprocess.run(
        [sys.executable, "-m", "tui.cli", "demo", "--headless", "--out", str(a_file)]
        + ["--sessions", str(sessions)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert r.returncode == 2 and "is a file" in r.stderr and "Traceback" not in r.stderr
    assert not sessions.exists() or not list(sessions.glob("*.sqlite"))  # nothing measured
    taken = tmp_path / "taken"
    export_session(build_session(tmp_path / "j", n_snapshots=2, n_meters=2), taken / "dataset")
    r = subprocess.run(
        [sys.executable, "-m", "tui.cli", "demo", "--headless", "--out", str(taken)]
        + ["--sessions", str(sessions)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert r.returncode == 2 and "already holds a dataset" in r.stderr
    assert not sessions.exists() or not list(sessions.glob("*.sqlite"))


def test_check_dataset_target_refuses_a_symlink(journal, tmp_path):
    real = export_session(journal, tmp_path / "real")
    link = tmp_path / "link"
    link.symlink_to(real)
    with pytest.raises(BenchwalkError, match="symbolic link"):
        export_session(journal, link, overwrite=True)
    verify_dataset(real)


@pytest.mark.slow
def test_resume_after_an_interrupted_export_writes_the_dataset_again(tmp_path):
    """A demo whose export was cut short (no report, a killed export's partial folder left):
    resuming the finished session with --reexport (a finished session is never exported again
    silently) exports again over its own dataset and cleans up."""
    from support.benches import write_fast_demo

    profile = write_fast_demo(tmp_path / "bench")
    out, sessions = tmp_path / "o", tmp_path / "s"
    r = subprocess.run(
        [sys.executable, "-m", "tui.cli", "demo", "--headless", "--profile", str(profile)]
        + ["--sessions", str(sessions), "--out", str(out), "--seed", "3"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert r.returncode in (0, 1), r.stderr
    (out / "report.html").unlink()
    (out / "report.md").unlink()
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    (out / f".dataset.partial-{dead.pid}" / "data").mkdir(parents=True)
    journal = next(sessions.glob("*.sqlite"))
    r = subprocess.run(
        [sys.executable, "-m", "tui.cli", "resume", str(journal), "--headless", "--reexport"]
        + ["--out", str(out)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert r.returncode in (0, 1), r.stderr
    assert "Dataset written to" in r.stdout
    assert sorted(p.name for p in out.iterdir()) == ["dataset", "report.html", "report.md"]
    verify_dataset(out / "dataset")

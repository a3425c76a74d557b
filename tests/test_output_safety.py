"""The output folder never costs the user a file: inputs guarded, foreign files kept, one writer at a time.

A compile replaces its output folder as a whole. These tests are table-driven: each class of hostile
output path has several cases, and each checks that the refusal is an input error (exit code 2) naming
the path, and that every file the user had is still there, byte for byte.
"""

from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from compiler.cli import main
from compiler.errors import InputError
from compiler.render import outputs
from compiler.render.outputs import MARKER, atomic_folder


def _snapshot(folder: Path) -> dict[str, str]:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _fill(name: str = "emissions.csv", text: str = "year\n2020\n"):
    def fill(tmp: Path) -> None:
        (tmp / name).write_text(text, encoding="utf-8")
    return fill


# ------------------------------------------------------------------ inputs are never inside the output folder

@pytest.mark.parametrize("where", [
    "settings_folder",          # --out is the folder that holds the settings and activity
    "parent_of_settings",       # --out sits above it
    "grandparent_of_settings",  # two levels above
    "settings_folder_via_dots", # the same folder spelled with ..
])
def test_an_output_folder_never_holds_an_input(demo_copy, capsys, where):
    folder = demo_copy.parent
    out = {"settings_folder": folder, "parent_of_settings": folder.parent,
           "grandparent_of_settings": folder.parent.parent,
           "settings_folder_via_dots": folder / "previous" / ".."}[where]
    (folder / MARKER).write_text("written by histosol; safe to replace with a new compile\n")  # a stale marker
    before = _snapshot(folder)
    code = main(["compile", str(demo_copy), "--out", str(out), "--no-report", "--iterations", "200", "--quiet"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "input" in err and "choose an --out outside the inputs" in err
    assert _snapshot(folder) == before


@pytest.mark.parametrize("inputs", [
    lambda root: [root / "in" / "settings.toml"],
    lambda root: [root / "settings.toml", root / "in" / "activity.csv"],
    lambda root: [root / "elsewhere" / "s.toml", root / "in" / "deep" / "review.csv"],
])
def test_atomic_folder_refuses_a_folder_above_any_input(tmp_path, inputs):
    paths = inputs(tmp_path)
    for p in paths:
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text("x")
    with pytest.raises(InputError, match="holds or sits above"):
        atomic_folder(tmp_path / "in", _fill(), inputs=paths)
    assert all(p.read_text() == "x" for p in paths)


def test_an_output_folder_beside_or_below_the_settings_is_fine(tmp_path):
    settings = tmp_path / "in" / "settings.toml"
    settings.parent.mkdir()
    settings.write_text("x")
    atomic_folder(tmp_path / "in" / "out", _fill(), inputs=[settings])
    atomic_folder(tmp_path / "out", _fill(), inputs=[settings])
    assert (tmp_path / "out" / "emissions.csv").exists() and (tmp_path / "in" / "out" / "emissions.csv").exists()


# ------------------------------------------------------ a folder the tool wrote, then the user put files into

@pytest.mark.parametrize("change", [
    lambda out: (out / "my_notes.txt").write_text("keep me"),
    lambda out: (out / "drafts").mkdir() or (out / "drafts" / "chapter.docx").write_bytes(b"draft"),
    lambda out: (out / "emissions.csv").write_text("year\n2020\nedited by hand\n"),
    lambda out: (out / "activity.csv").write_text("year,area_ha\n2020,1\n"),
])
def test_a_tool_folder_with_user_files_is_not_replaced(tmp_path, change):
    out = tmp_path / "out"
    atomic_folder(out, _fill())
    change(out)
    before = _snapshot(out)
    with pytest.raises(InputError, match="did not write, or that were changed") as caught:
        atomic_folder(out, _fill(text="year\n2021\n"))
    assert _snapshot(out) == before
    assert str(out) in str(caught.value)


def test_an_unchanged_tool_folder_is_replaced_including_a_nested_tool_folder(tmp_path):
    out = tmp_path / "out"
    atomic_folder(out, _fill())
    atomic_folder(out / "scenarios", _fill("scenario_climate.csv"))  # `demo --scenarios` writes here
    atomic_folder(out, _fill(text="year\n2021\n"))
    assert (out / "emissions.csv").read_text() == "year\n2021\n"
    assert not (out / "scenarios").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no lock, temporary or old folder left


def test_a_user_file_inside_a_nested_tool_folder_blocks_the_replacement(tmp_path):
    out = tmp_path / "out"
    atomic_folder(out, _fill())
    atomic_folder(out / "scenarios", _fill("scenario_climate.csv"))
    (out / "scenarios" / "my_chart.png").write_bytes(b"png")
    with pytest.raises(InputError, match="scenarios/my_chart.png"):
        atomic_folder(out, _fill())
    assert (out / "scenarios" / "my_chart.png").read_bytes() == b"png"


@pytest.mark.parametrize("extra, refused", [(None, False), ("notes.txt", True), ("report.pdf", False)])
def test_a_marker_without_a_listing_allows_only_the_names_the_tool_writes(tmp_path, extra, refused):
    out = tmp_path / "out"
    out.mkdir()
    (out / MARKER).write_text("written by histosol; safe to replace with a new compile\n")
    (out / "emissions.csv").write_text("old")
    if extra:
        (out / extra).write_text("x")
    if refused:
        with pytest.raises(InputError, match=extra):
            atomic_folder(out, _fill())
        assert (out / extra).read_text() == "x"
    else:
        atomic_folder(out, _fill())
        assert (out / "emissions.csv").read_text() == "year\n2020\n"


# -------------------------------------------------------------------------------------- paths that cannot be used

def test_an_output_below_a_file_is_an_input_error(tmp_path):
    (tmp_path / "a_file").write_text("x")
    for out in (tmp_path / "a_file" / "out", tmp_path / "a_file" / "deeper" / "out", tmp_path / "a_file"):
        with pytest.raises(InputError) as caught:
            atomic_folder(out, _fill())
        assert "a_file" in str(caught.value)
    assert (tmp_path / "a_file").read_text() == "x"


@pytest.mark.parametrize("fails", ["mkdtemp", "access"])
def test_an_unwritable_parent_is_an_input_error(tmp_path, monkeypatch, fails):
    # Tests run as root here, where permission bits do not stop a write: the refusal is simulated.
    if fails == "mkdtemp":
        def refuse(*args, **kwargs):
            raise PermissionError(13, "Permission denied")
        monkeypatch.setattr(outputs.tempfile, "mkdtemp", refuse)
    else:
        monkeypatch.setattr(outputs.os, "access", lambda *args, **kwargs: False)
    with pytest.raises(InputError, match="(cannot be created|not writable)"):
        atomic_folder(tmp_path / "out", _fill())
    assert not (tmp_path / "out").exists()


def test_an_existing_output_that_cannot_be_moved_is_an_input_error(tmp_path, monkeypatch):
    out = tmp_path / "out"
    atomic_folder(out, _fill())
    real = os.rename

    def refuse(src, dst):
        if Path(src) == out:
            raise OSError(16, "Device or resource busy")
        return real(src, dst)

    monkeypatch.setattr(outputs.os, "rename", refuse)
    with pytest.raises(InputError, match="cannot be moved aside.*busy"):
        atomic_folder(out, _fill(text="new"))
    assert (out / "emissions.csv").read_text() == "year\n2020\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


# ----------------------------------------------------------------------------------------- one writer at a time

def test_a_second_run_into_the_same_folder_is_refused_while_the_first_writes(tmp_path):
    out = tmp_path / "out"
    seen = {}

    def fill(tmp: Path) -> None:
        with pytest.raises(InputError, match="another run is writing this output folder") as caught:
            atomic_folder(out, _fill())
        seen["message"] = str(caught.value)
        (tmp / "emissions.csv").write_text("first")

    atomic_folder(out, fill)
    assert (out / "emissions.csv").read_text() == "first"
    assert str(out) in seen["message"]
    atomic_folder(out, _fill())  # the lock is released afterwards
    assert not (tmp_path / ".out.lock").exists()


@pytest.mark.slow
def test_two_processes_into_one_folder_one_wins_the_other_exits_2(tmp_path):
    script = textwrap.dedent(f"""
        import sys, time
        from pathlib import Path
        from compiler.cli import main
        from compiler.render import outputs
        real = outputs._write_marker
        def slow(folder):
            time.sleep(1.5)
            real(folder)
        outputs._write_marker = slow
        sys.exit(main(["demo", "--out", {str(tmp_path / 'out')!r}, "--no-report", "--iterations", "200",
                       "--quiet"]))
    """)
    procs = [subprocess.Popen([sys.executable, "-c", script], stderr=subprocess.PIPE, text=True) for _ in range(2)]
    results = [(p.wait(timeout=300), p.stderr.read()) for p in procs]
    codes = sorted(code for code, _ in results)
    assert codes == [0, 2], results
    assert any("another run is writing this output folder" in err for _, err in results)
    assert (tmp_path / "out" / "inventory.xlsx").exists()


# ------------------------------------------------------------------------ the report process ends with its parent

def test_the_forked_report_process_dies_with_a_killed_parent(tmp_path):
    script = textwrap.dedent(f"""
        import sys, time
        from pathlib import Path
        import compiler.render.report as report
        from compiler.render.outputs import ReportJob
        def slow_report(result, folder):
            for _ in range(600):
                time.sleep(0.05)
            (Path(folder) / "late.txt").write_text("written after the parent died")
        report.write_report = slow_report
        job = ReportJob.start(None, Path({str(tmp_path)!r}))
        print(job.process.pid, flush=True)
        time.sleep(60)
    """)
    parent = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True)
    child = int(parent.stdout.readline())
    parent.send_signal(signal.SIGKILL)
    parent.wait(timeout=10)
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and _alive(child):
        time.sleep(0.1)
    assert not _alive(child), "the report process outlived its killed parent"
    assert not (tmp_path / "late.txt").exists()


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as stat:
            return stat.read().split(") ", 1)[1][0] != "Z"  # a zombie has ended
    except FileNotFoundError:
        return False
    except OSError:  # pragma: no cover - no /proc: ask the kernel
        try:
            os.kill(pid, 0)
            return True
        except ProcessLookupError:
            return False

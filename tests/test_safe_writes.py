"""Safe writes and input safety: staged outputs, refused output folders, interrupted runs.

Runs use a private copy of the invented example project. The kill test starts
``python -m nutricap estimate`` in a subprocess and kills it (SIGKILL) while it writes its
staging folder; the previous results must stay byte-identical.
"""

import errno
import hashlib
import json
import os
import signal
import subprocess
import sys
import time

import pytest

import nutricap.report.bundle
from nutricap.cli import main
from nutricap.errors import OutputError
from nutricap.report import output_folder as outputs
from nutricap.report.output_folder import check_output_folder, recover_interrupted, staged_folder

KILL_ATTEMPTS = 3
POLL_S = 0.002
START_TIMEOUT_S = 120.0


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _digest(folder):
    """Relative path → SHA-256 of every file under ``folder`` (hashlib, independent)."""
    return {
        str(path.relative_to(folder)): hashlib.sha256(path.read_bytes()).hexdigest()
        for path in sorted(folder.rglob("*"))
        if path.is_file()
    }


def _tables_of(digest):
    """The CSV tables of a digest (run.json and the GeoPackage hold the time of the run)."""
    return {name: value for name, value in digest.items() if name.endswith(".csv")}


def _tables(folder):
    return _tables_of(_digest(folder))


def _hidden_leftovers(folder, name="results"):
    return sorted(p.name for p in folder.iterdir() if p.name.startswith(f".{name}."))


def _refused(capsys, argv, words):
    code, _, err = _run(capsys, *argv)
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and "Traceback" not in err, err
    assert words in lines[0], lines[0]
    return lines[0]


# --- output folders that are refused ---------------------------------------------------------


@pytest.mark.parametrize(
    "where", ["input folder", "inside the input folder", "contains the input folder"]
)
def test_out_related_to_an_input_folder_is_refused(project, capsys, where):
    folder = project.parent
    out = {
        "input folder": folder,
        "inside the input folder": folder / "results",
        "contains the input folder": folder.parent,
    }[where]
    before = _digest(folder.parent)
    line = _refused(capsys, ("estimate", project, "--out", out, "--overwrite", "--quiet"), "input")
    assert str(out.resolve()) in line
    assert _digest(folder.parent) == before
    assert not (folder / "results").exists()


def test_out_is_the_project_file(project, capsys):
    before = _digest(project.parent)
    _refused(capsys, ("estimate", project, "--out", project, "--overwrite", "--quiet"), "input")
    assert _digest(project.parent) == before


def test_out_is_a_file(project, tmp_path, capsys):
    target = tmp_path / "notes.txt"
    target.write_text("field notes\n")
    _refused(capsys, ("estimate", project, "--out", target, "--quiet"), "the output path is a file")
    assert target.read_text() == "field notes\n"


def test_out_under_a_file_is_refused_before_the_run(project, tmp_path, capsys, monkeypatch):
    # A file where a folder of --out's path should be: refused up front, naming the file (it
    # once came after the whole estimate as "File exists").
    import nutricap.workflow.runs as runs

    monkeypatch.setattr(runs, "estimate", lambda *a, **k: pytest.fail("the estimate ran"))
    blocker = tmp_path / "notes.txt"
    blocker.write_text("field notes\n")
    out = blocker / "results" / "winter"
    line = _refused(capsys, ("estimate", project, "--out", out, "--quiet"), "part of its path")
    assert f"found {blocker} is a file" in line
    assert blocker.read_text() == "field notes\n"


def test_out_where_nothing_can_be_written_is_refused(project, tmp_path, capsys, monkeypatch):
    # The write check makes and removes a folder; a disk that refuses it (read-only, or no
    # permission) is named before any work. The refusal is simulated: root may write anywhere.
    def refuse(*_args, **_kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))

    monkeypatch.setattr(outputs.tempfile, "mkdtemp", refuse)
    line = _refused(
        capsys, ("estimate", project, "--out", tmp_path / "out", "--quiet"), "cannot be written"
    )
    assert "Read-only file system" in line and not (tmp_path / "out").exists()


def test_out_is_a_symbolic_link_loop(project, tmp_path, capsys):
    out = tmp_path / "results"
    out.symlink_to(out)
    line = _refused(capsys, ("estimate", project, "--out", out, "--quiet"), "loops back on itself")
    assert line.startswith(f"nutricap: error: {out}: the output path is a symbolic link"), line
    assert out.is_symlink()


def test_existing_results_replaced_only_with_overwrite(project, tmp_path, capsys):
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--no-figures", "--quiet")[0] == 0
    first = _digest(out)
    _refused(capsys, ("estimate", project, "--out", out, "--quiet"), "--overwrite")
    assert _digest(out) == first
    code, _, _ = _run(capsys, "estimate", project, "--out", out, "--overwrite", "--quiet",
                      "--no-report")  # fmt: skip
    assert code == 0
    assert not (out / "report.html").exists(), "the folder was replaced, not written into"
    assert _tables(out) == _tables_of(first)
    assert _hidden_leftovers(tmp_path) == []


@pytest.mark.parametrize("change", ["file added", "file changed", "folder added"])
def test_overwrite_never_deletes_a_file_nutricap_did_not_write(project, tmp_path, capsys,
                                                               change):  # fmt: skip
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    if change == "file added":
        (out / "field_notes.txt").write_text("my notes\n")
    elif change == "file changed":
        with open(out / "capacity_by_unit.csv", "a") as table:
            table.write("my own row\n")
    else:
        (out / "photos").mkdir()
        (out / "photos" / "a.jpg").write_bytes(b"jpeg")
    before = _digest(out)
    argv = ("estimate", project, "--out", out, "--overwrite", "--quiet", "--no-report")
    line = _refused(capsys, argv, "not nutricap results")
    words = {"file added": "field_notes.txt (not written by nutricap)",
             "file changed": "capacity_by_unit.csv (changed since nutricap wrote it)",
             "folder added": "photos/ (not written by nutricap)"}  # fmt: skip
    assert words[change] in line
    assert _digest(out) == before
    assert _hidden_leftovers(tmp_path) == []


def test_file_added_while_the_run_computes_is_not_deleted(project, tmp_path, capsys,
                                                          monkeypatch):  # fmt: skip
    # The check at the start passed; a file appears before the old results are moved aside.
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    write = nutricap.report.bundle.write_csv

    def add_a_file_meanwhile(table, path):
        (out / "added_meanwhile.txt").write_text("new\n")
        write(table, path)

    monkeypatch.setattr(nutricap.report.bundle, "write_csv", add_a_file_meanwhile)
    argv = ("estimate", project, "--out", out, "--overwrite", "--quiet", "--no-report")
    _refused(capsys, argv, "added_meanwhile.txt (not written by nutricap)")
    assert (out / "added_meanwhile.txt").read_text() == "new\n"
    assert (out / "capacity_by_unit.csv").is_file()
    assert _hidden_leftovers(tmp_path) == []


def test_overwrite_never_replaces_a_folder_of_other_files(project, tmp_path, capsys):
    out = tmp_path / "my_documents"
    out.mkdir()
    (out / "thesis.docx").write_bytes(b"irreplaceable")
    _refused(
        capsys,
        ("estimate", project, "--out", out, "--overwrite", "--quiet", "--no-report"),
        "not nutricap results",
    )
    assert [p.name for p in out.iterdir()] == ["thesis.docx"]
    assert (out / "thesis.docx").read_bytes() == b"irreplaceable"
    assert _hidden_leftovers(tmp_path, "my_documents") == []


def test_empty_existing_folder_is_used_without_overwrite(project, tmp_path, capsys):
    out = tmp_path / "results"
    out.mkdir()
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    assert (out / "capacity_by_unit.csv").is_file()


# --- two runs at once; permissions -----------------------------------------------------------


def _estimate_process(project, out):
    command = [sys.executable, "-m", "nutricap", "estimate", str(project), "--out", str(out),
               "--quiet", "--no-report"]  # fmt: skip
    return subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


@pytest.mark.parametrize("target", ["new folder", "empty folder"])
def test_two_runs_to_the_same_new_folder_one_wins(project, tmp_path, target):
    out = tmp_path / "results"
    if target == "empty folder":
        out.mkdir()
    runs = [_estimate_process(project, out) for _ in range(2)]
    finished = [(run.wait(), *run.communicate()) for run in runs]
    codes = sorted(code for code, _, _ in finished)
    assert codes == [0, 2], finished
    (loser,) = [err for code, _, err in finished if code == 2]
    assert len(loser.strip().splitlines()) == 1 and "Traceback" not in loser, loser
    assert str(out) in loser
    assert all(out == "" for _, out, _ in finished), "--quiet prints nothing"
    # The winner's results are whole: every file it listed, unchanged, and nothing else.
    assert outputs.foreign_files(out) == []
    listed = json.loads((out / outputs.OUTPUTS_LIST).read_text())["files"]
    assert {"capacity_by_unit.csv", "run.json", "capacity_by_unit.gpkg"} <= set(listed)
    assert _hidden_leftovers(tmp_path) == []


def test_a_run_that_finishes_second_is_refused_at_its_final_move(tmp_path):
    # The check at the start saw a new folder; another run moved its results there meanwhile.
    out = tmp_path / "results"
    with pytest.raises(OutputError, match="another run wrote this output folder"):
        with staged_folder(out) as slow:
            (slow / "capacity_by_unit.csv").write_text("slow\n")
            with staged_folder(out) as fast:
                (fast / "capacity_by_unit.csv").write_text("fast\n")
    assert (out / "capacity_by_unit.csv").read_text() == "fast\n"
    assert outputs.foreign_files(out) == []
    assert _hidden_leftovers(tmp_path) == []


UMASKS = [(0o022, 0o755, 0o644), (0o027, 0o750, 0o640)]


@pytest.mark.skipif(os.name != "posix", reason="POSIX permissions")
@pytest.mark.parametrize(("umask", "folder_mode", "file_mode"), UMASKS)
def test_outputs_follow_the_umask(project, tmp_path, capsys, umask, folder_mode, file_mode):
    # Modes expected from POSIX open(2)/mkdir(2): requested mode 0666/0777 minus the umask.
    out = tmp_path / "shared" / "results"
    previous = os.umask(umask)
    try:
        assert _run(capsys, "estimate", project, "--out", out, "--quiet")[0] == 0
    finally:
        os.umask(previous)
    modes = {path.name: path.stat().st_mode & 0o777 for path in [out, *out.rglob("*")]}
    assert modes.pop("results") == folder_mode
    assert modes.pop("figures") == folder_mode  # the report's figure files, a folder inside
    assert modes and set(modes.values()) == {file_mode}, modes
    assert (out.parent.stat().st_mode & 0o777) == folder_mode


# --- failures part-way leave the previous results ---------------------------------------------


@pytest.mark.parametrize("failure", [RuntimeError, KeyboardInterrupt])
def test_failure_while_writing_keeps_previous_results(project, tmp_path, capsys, monkeypatch,
                                                      failure):  # fmt: skip
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    first = _digest(out)
    written = []

    def fail_after_tables(table, units, path):
        written.extend(p.name for p in path.parent.iterdir())
        raise failure("simulated failure while writing")

    monkeypatch.setattr(nutricap.report.bundle, "write_geopackage", fail_after_tables)
    if failure is KeyboardInterrupt:
        code, _, err = _run(capsys, "estimate", project, "--out", out, "--overwrite", "--quiet")
        assert code == 130 and len(err.strip().splitlines()) == 1 and "interrupted" in err
    else:
        with pytest.raises(RuntimeError):
            main(["estimate", str(project), "--out", str(out), "--overwrite", "--quiet"])
    assert "capacity_by_unit.csv" in written, "the failure came part-way through writing"
    assert _digest(out) == first
    assert _hidden_leftovers(tmp_path) == []


@pytest.mark.parametrize("earlier_results", [False, True])
def test_a_full_disk_names_the_output_folder(project, tmp_path, capsys, monkeypatch,
                                             earlier_results):  # fmt: skip
    out = tmp_path / "results"
    if earlier_results:
        assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    first = _digest(out) if earlier_results else None
    real_write_csv = nutricap.report.bundle.write_csv

    def disk_full_at_the_third_table(table, path):
        if len(list(path.parent.iterdir())) >= 2:
            # What write(2) raises on a full disk: errno ENOSPC and no file name.
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real_write_csv(table, path)

    monkeypatch.setattr(nutricap.report.bundle, "write_csv", disk_full_at_the_third_table)
    line = _refused(
        capsys, ("estimate", project, "--out", out, "--overwrite", "--quiet"), "No space left"
    )
    assert line.startswith(f"nutricap: error: {out.resolve()}: cannot write the results"), line
    assert "free some space or choose another --out" in line
    if earlier_results:
        assert _digest(out) == first
    else:
        assert not out.exists()
    assert _hidden_leftovers(tmp_path) == []


def test_bad_input_with_overwrite_keeps_previous_results(project, tmp_path, capsys):
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    first = _digest(out)
    plots = project.parent / "plots.csv"
    plots.write_text(plots.read_text().replace(",21.5,", ",-21.5,", 1))
    _refused(capsys, ("estimate", project, "--out", out, "--overwrite", "--quiet"), "row 2")
    assert _digest(out) == first


def _staging_with_a_file(parent):
    for folder in parent.glob(".results.partial-*"):
        try:
            if any(folder.iterdir()):
                return folder
        except FileNotFoundError:  # renamed into place meanwhile
            return None
    return None


def _start_and_kill_while_writing(project, out):
    """Run estimate in a subprocess and SIGKILL it once its staging folder holds a file.

    Returns True when killed part-way, False when the run finished first.
    """
    command = [sys.executable, "-m", "nutricap", "estimate", str(project), "--out", str(out),
               "--overwrite", "--quiet"]  # fmt: skip
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + START_TIMEOUT_S
    try:
        while process.poll() is None and time.monotonic() < deadline:
            if _staging_with_a_file(out.parent) is not None:
                process.send_signal(signal.SIGKILL)
                process.wait()
                return True
            time.sleep(POLL_S)
    finally:
        if process.poll() is None:
            process.kill()
        process.wait()
        process.stderr.close()
    assert process.returncode == 0, "the run ended with an error before it could be killed"
    return False


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL is POSIX")
def test_killed_run_leaves_previous_results_and_next_run_tidies_up(project, tmp_path, capsys):
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    first = _digest(out)
    killed = any(_start_and_kill_while_writing(project, out) for _ in range(KILL_ATTEMPTS))
    if not killed:
        pytest.fail(f"each of {KILL_ATTEMPTS} runs finished before its staging folder was seen")
    assert _digest(out) == first, "the previous results changed"
    stale = _hidden_leftovers(tmp_path)
    assert stale and all(".partial-" in name for name in stale), stale
    # The next run to the same folder removes the dead run's staging folder.
    assert _run(capsys, "estimate", project, "--out", out, "--overwrite", "--quiet",
                "--no-report")[0] == 0  # fmt: skip
    assert _hidden_leftovers(tmp_path) == []
    assert _tables(out) == _tables_of(first)


# --- leftovers of interrupted runs ------------------------------------------------------------


def _dead_pid():
    """The id of a process that has ended (and been reaped)."""
    process = subprocess.Popen([sys.executable, "-c", "pass"])
    process.wait()
    return process.pid


def _results(folder, text):
    """A folder as a run leaves it: run.json and the list of the files written."""
    folder.mkdir()
    (folder / "run.json").write_text(text)
    outputs.write_outputs_list(folder)
    return folder


@pytest.mark.skipif(os.name != "posix", reason="process ids are checked the POSIX way")
def test_kill_between_the_two_renames_is_undone(tmp_path):
    # Killed after the old results were renamed aside and before the new ones took their place.
    out = tmp_path / "results"
    pid = _dead_pid()
    old = _results(tmp_path / f".results.old-{outputs._host()}-{pid}", "previous")
    partial = _results(tmp_path / f".results.partial-{outputs._host()}-{pid}-abc123", "new")
    touched = recover_interrupted(out)
    assert sorted(touched) == sorted([old, partial])
    assert (out / "run.json").read_text() == "previous"
    assert _hidden_leftovers(tmp_path) == []


@pytest.mark.skipif(os.name != "posix", reason="process ids are checked the POSIX way")
def test_stale_old_folder_removed_when_new_results_are_in_place(tmp_path):
    out = _results(tmp_path / "results", "new")
    _results(tmp_path / f".results.old-{outputs._host()}-{_dead_pid()}", "previous")
    check_output_folder(out, [], overwrite=True)
    assert (out / "run.json").read_text() == "new"
    assert _hidden_leftovers(tmp_path) == []


def test_leftovers_of_running_processes_and_other_machines_are_kept(tmp_path):
    out = tmp_path / "results"
    mine = _results(tmp_path / f".results.partial-{outputs._host()}-{os.getpid()}-abc", "x")
    other = _results(tmp_path / f".results.partial-otherhost-{_dead_pid()}-abc", "x")
    assert recover_interrupted(out) == []
    assert mine.is_dir() and other.is_dir() and not out.exists()


def test_staged_folder_removes_its_staging_on_failure(tmp_path):
    out = tmp_path / "results"
    with pytest.raises(ValueError), staged_folder(out) as staging:
        (staging / "capacity_by_unit.csv").write_text("half")
        raise ValueError("simulated")
    assert list(tmp_path.iterdir()) == []


def test_staged_folder_refuses_a_folder_without_results(tmp_path):
    out = tmp_path / "photos"
    out.mkdir()
    (out / "a.jpg").write_bytes(b"jpeg")
    with pytest.raises(OutputError, match="not empty"), staged_folder(out):
        pytest.fail("must not be reached")
    with pytest.raises(OutputError, match="not nutricap results"):
        with staged_folder(out, overwrite=True):
            pytest.fail("must not be reached")
    assert [p.name for p in tmp_path.iterdir()] == ["photos"]


# --- input safety --------------------------------------------------------------------------


def test_paths_resolved_from_the_project_file_and_reported_in_full(project, tmp_path, capsys,
                                                                   monkeypatch):  # fmt: skip
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    relative = os.path.relpath(project, elsewhere)
    code, out, _ = _run(capsys, "check", relative)
    assert code == 0 and str(project.resolve()) in out
    plots = project.parent / "plots.csv"
    plots.write_text(plots.read_text().replace(",21.5,", ",-21.5,", 1))
    line = _refused(capsys, ("check", relative, "--quiet"), "row 2, column 'dry_mass_g'")
    assert str(plots.resolve()) in line
    assert list(elsewhere.iterdir()) == []


def test_project_file_values_are_data_never_code(project, tmp_path, capsys):
    marker = tmp_path / "was_run"
    attempts = f"__import__('os').system('touch {marker}') $(touch {marker}) `touch {marker}`"
    text = project.read_text(encoding="utf-8").replace(
        'species = "mule deer"', f"species = {json.dumps(attempts)}"
    )
    project.write_text(text, encoding="utf-8")
    out = tmp_path / "results"
    assert _run(capsys, "estimate", project, "--out", out, "--quiet", "--no-report")[0] == 0
    assert not marker.exists()
    markdown = (out / "capacity_by_unit.md").read_text(encoding="utf-8")
    assert r"\_\_import\_\_('os').system" in markdown  # kept as text (Markdown-escaped)

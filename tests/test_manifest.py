"""Input checksums of the run manifest, computed in the caller's thread or in the background."""

from __future__ import annotations

import hashlib
import json

import pytest

from nutricap.inputs.project import load_project
from nutricap.report.manifest import (
    CHUNK_BYTES,
    BackgroundChecksums,
    input_checksums,
    sha256_of_file,
)
from nutricap.workflow import run_estimate

# FIPS 180-2, Appendix B.1: SHA-256 of the one-block message "abc" (value from memory).
ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_sha256_of_a_published_test_message(tmp_path):
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    assert sha256_of_file(path) == ABC_SHA256


def test_a_file_longer_than_one_read_is_hashed_whole(tmp_path):
    """The digest of a file read in several chunks equals the digest of its bytes at once."""
    content = bytes(range(256)) * (CHUNK_BYTES // 256 * 2 + 3)
    path = tmp_path / "long.bin"
    path.write_bytes(content)
    assert sha256_of_file(path) == hashlib.sha256(content).hexdigest()


def test_background_checksums_equal_the_direct_ones(tmp_path):
    paths = []
    for number in range(3):
        path = tmp_path / f"input_{number}.csv"
        path.write_text(f"column\n{number}\n", encoding="utf-8")
        paths.append(path)
    paths.append(tmp_path / "missing.csv")  # not a file: left out by both
    assert BackgroundChecksums(paths).result() == input_checksums(paths)


def test_an_error_of_the_background_thread_is_raised_by_result(tmp_path, monkeypatch):
    path = tmp_path / "input.csv"
    path.write_text("column\n1\n", encoding="utf-8")

    def failing_read(_path):
        raise OSError("disk read failed")

    monkeypatch.setattr("nutricap.report.manifest.sha256_of_file", failing_read)
    with pytest.raises(OSError, match="disk read failed"):
        BackgroundChecksums([path]).result()


def test_the_manifest_lists_every_project_file(example_project, tmp_path):
    project = load_project(example_project)
    run_estimate(project, tmp_path / "out", report=False)
    manifest = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert set(manifest["inputs"]) == {str(path) for path in project.files() if path.is_file()}
    for path, entry in manifest["inputs"].items():
        assert entry["sha256"] == sha256_of_file(path)

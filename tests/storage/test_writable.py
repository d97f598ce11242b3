"""Output folders (kiln.storage.writable): refused before the work in one line naming the folder and
the cause, and a failed write leaves the folder as it was.

Sources: Python's ``errno`` and ``os`` docs (the error numbers and their ``strerror`` texts), the
``resource`` module docs (RLIMIT_FSIZE: "the maximum size of a file which the process may create";
a write beyond it fails with EFBIG once SIGXFSZ is ignored, which CPython does at start-up, from
memory), and hand-built folder trees whose contents before and after are written in each test.
"""

import errno
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from kiln.errors import KilnError
from kiln.storage.writable import check_writable, kept_only_if_complete, reason

REPO = Path(__file__).resolve().parents[2]


def _tree(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob("*"))


@pytest.mark.parametrize(
    "number,cause",
    [
        (errno.EFBIG, "a file reached this process's file-size limit (ulimit -f)"),
        (errno.ENOSPC, "no space left on the device"),
        (errno.EDQUOT, "the disk quota is used up"),
        (errno.EROFS, "the file system is read-only"),
        (errno.EACCES, "permission denied"),
        (errno.ENOTDIR, "part of the path is a file, not a folder"),
    ],
)
def test_reason_says_what_an_os_error_means(number, cause):
    assert reason(OSError(number, os.strerror(number))) == cause


def test_reason_of_an_error_without_a_number_is_its_first_line():
    # Video writers raise OSError with only a message: its first line, lower-cased.
    assert reason(OSError("MoviePy error: failed to write\nffmpeg said: ...")) == "moviepy error: failed to write"
    assert reason(OSError(errno.EIO, "Input/output error")) == "input/output error"  # unknown number: strerror
    assert reason(OSError()) == "oserror"


def test_a_writable_folder_passes_and_keeps_no_trace(tmp_path):
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "kept.txt").write_text("earlier")
    check_writable(tmp_path / "out", "choose another out=")
    assert _tree(tmp_path) == ["out", "out/kept.txt"]
    # Missing folders are made for the probe and removed after it.
    check_writable(tmp_path / "new" / "deeper", "choose another out=")
    assert _tree(tmp_path) == ["out", "out/kept.txt"]


def test_a_path_through_a_file_is_refused_in_one_line(tmp_path):
    (tmp_path / "report.txt").write_text("a file, not a folder")
    with pytest.raises(KilnError) as caught:
        check_writable(tmp_path / "report.txt" / "plots", "choose another out=")
    assert str(caught.value) == (
        f"cannot write to {tmp_path / 'report.txt' / 'plots'} (part of the path is a file, not a folder): choose another out="
    )
    with pytest.raises(KilnError, match="part of the path is a file"):
        check_writable(tmp_path / "report.txt", "choose another out=")  # the folder itself is a file
    assert _tree(tmp_path) == ["report.txt"]


_UNDER_A_ZERO_FILE_SIZE_LIMIT = textwrap.dedent(
    """
    import resource, sys
    resource.setrlimit(resource.RLIMIT_FSIZE, (0, resource.getrlimit(resource.RLIMIT_FSIZE)[1]))
    from kiln.errors import KilnError
    from kiln.storage.writable import check_writable
    try:
        check_writable(sys.argv[1], "raise the limit")
    except KilnError as err:
        print(err)
    """
)


def test_a_file_size_limit_of_zero_is_found_before_the_work(tmp_path):
    # A real limit in a child process (the test's own process keeps its limits): one byte is written,
    # so the limit shows here, not after minutes of work.
    out = subprocess.run(
        [sys.executable, "-c", _UNDER_A_ZERO_FILE_SIZE_LIMIT, str(tmp_path / "out")],
        capture_output=True, text=True, cwd=REPO, timeout=120, check=False,
    )  # fmt: skip
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == (
        f"cannot write to {tmp_path / 'out'} (a file reached this process's file-size limit (ulimit -f)): raise the limit"
    )
    assert _tree(tmp_path) == []  # the probe and the folder made for it are gone


def test_a_failed_block_removes_only_the_folders_it_created(tmp_path):
    target = tmp_path / "evaluations" / "run1"
    with pytest.raises(KilnError) as caught, kept_only_if_complete(target, "the evaluation record", "free some space"):
        (target / "half.json").write_text('{"ret')
        raise OSError(errno.ENOSPC, "No space left on device")
    assert str(caught.value) == f"cannot write the evaluation record to {target} (no space left on the device): free some space"
    assert _tree(tmp_path) == []


def test_a_failed_block_keeps_what_was_there_before(tmp_path):
    (tmp_path / "earlier.json").write_text("kept")
    with pytest.raises(KilnError), kept_only_if_complete(tmp_path, "the report", "free some space"):
        (tmp_path / "new.json").write_text("half")
        raise OSError(errno.EFBIG, "File too large")
    # Another writer may share the folder: without sole_writer nothing already there or new is removed.
    assert _tree(tmp_path) == ["earlier.json", "new.json"]


def test_a_sole_writer_also_loses_the_files_its_block_left(tmp_path):
    (tmp_path / "seed1.mp4").write_bytes(b"an earlier video")
    videos = kept_only_if_complete(tmp_path, "the videos", "free some space", sole_writer=True)
    with pytest.raises(KilnError, match="cannot write the videos"), videos:
        (tmp_path / "seed2.mp4").write_bytes(b"half a video")
        (tmp_path / "frames").mkdir()
        (tmp_path / "frames" / "0.png").write_bytes(b"")
        raise OSError(errno.ENOSPC, "No space left on device")
    assert _tree(tmp_path) == ["seed1.mp4"]


def test_other_errors_pass_through_after_the_same_cleanup(tmp_path):
    target = tmp_path / "made"
    with pytest.raises(KeyError), kept_only_if_complete(target, "the report", "free some space"):
        (target / "part").write_text("x")
        raise KeyError("a bug in the writer, not a failed write")
    assert _tree(tmp_path) == []


def test_a_complete_block_keeps_everything(tmp_path):
    target = tmp_path / "made" / "here"
    with kept_only_if_complete(target, "the report", "free some space"):
        (target / "report.md").write_text("done")
    assert _tree(tmp_path) == ["made", "made/here", "made/here/report.md"]

"""``kiln export``: what it writes and prints, and one-line refusals that leave every file as it was
(requirements of the project; no outside source). The exported numbers themselves are checked
against onnxruntime and NumPy in tests/onnx_export/test_parity.py."""

from pathlib import Path

import onnx
import pytest

from kiln.onnx_export import CAUTION
from tests.support.cli import assert_one_line_error, run_kiln
from tests.support.export_fixtures import save_test_policy


@pytest.fixture
def run_folder(tmp_path: Path) -> Path:
    """A run folder as training leaves it, as far as export reads it: policy/ inside."""
    save_test_policy(tmp_path / "run" / "policy", widths=(16, 16))
    return tmp_path / "run"


def test_export_writes_the_file_and_prints_what_it_is_and_the_caution(run_folder: Path) -> None:
    proc = run_kiln("export", "run", "--out", "controller.onnx", cwd=run_folder.parent, timeout=300)
    assert proc.returncode == 0, proc.stderr
    model = onnx.load(str(run_folder.parent / "controller.onnx"))
    assert [v.name for v in model.graph.input] == ["observation"]
    size = (run_folder.parent / "controller.onnx").stat().st_size
    assert f"controller.onnx  ({size / 1024:.1f} KiB, ONNX opset 17, deterministic" in proc.stdout
    assert "onnxruntime vs Kiln on 1000 observations: max |difference|" in proc.stdout
    assert CAUTION in proc.stdout and "not safe to run on physical equipment" in CAUTION


def test_stochastic_export_at_another_opset_takes_noise(run_folder: Path) -> None:
    proc = run_kiln("export", "run/policy", "--out", "sampler.onnx", "--stochastic", "--opset", "13",
                    cwd=run_folder.parent, timeout=300)  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    model = onnx.load(str(run_folder.parent / "sampler.onnx"))
    assert [v.name for v in model.graph.input] == ["observation", "noise"]
    assert model.opset_import[0].version == 13 and "ONNX opset 13, stochastic" in proc.stdout


def test_a_folder_without_a_policy_is_refused(tmp_path: Path) -> None:
    (tmp_path / "notes").mkdir()
    proc = run_kiln("export", "notes", "--out", "controller.onnx", cwd=tmp_path, timeout=300)
    assert_one_line_error(proc, "notes")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes"]


@pytest.mark.parametrize("opset", ["12", "22"])
def test_an_unsupported_opset_is_refused(run_folder: Path, opset: str) -> None:
    proc = run_kiln("export", "run", "--out", "controller.onnx", "--opset", opset, cwd=run_folder.parent, timeout=300)
    assert_one_line_error(proc, f"opset {opset} is not supported", "13 to 21")
    assert not (run_folder.parent / "controller.onnx").exists()


def test_an_existing_file_is_kept_unless_overwrite_is_asked(run_folder: Path) -> None:
    out = run_folder.parent / "controller.onnx"
    out.write_bytes(b"an earlier file")
    proc = run_kiln("export", "run", "--out", "controller.onnx", cwd=run_folder.parent, timeout=300)
    assert_one_line_error(proc, "controller.onnx already exists", "--overwrite")
    assert out.read_bytes() == b"an earlier file"
    proc = run_kiln("export", "run", "--out", "controller.onnx", "--overwrite", cwd=run_folder.parent, timeout=300)
    assert proc.returncode == 0, proc.stderr
    onnx.checker.check_model(onnx.load(str(out)))
    # Written under a temporary name and renamed: nothing else is left beside it.
    assert sorted(p.name for p in run_folder.parent.iterdir()) == ["controller.onnx", "run"]


@pytest.mark.parametrize(
    "args,phrases",
    [
        (["run"], ["--out"]),  # argparse's own message, through the one-line parser
        (["run", "--out", "."], ["is a folder"]),
        (["run", "--out", "missing/controller.onnx"], ["does not exist"]),
        (["run", "--out", "x.onnx", "--opset", "seventeen"], ["--opset"]),
    ],
)
def test_other_bad_arguments_are_one_line(run_folder: Path, args: list[str], phrases: list[str]) -> None:
    assert_one_line_error(run_kiln("export", *args, cwd=run_folder.parent, timeout=300), *phrases)
    assert sorted(p.name for p in run_folder.parent.iterdir()) == ["run"]


def test_help_shows_the_options_and_the_caution(tmp_path: Path) -> None:
    proc = run_kiln("export", "--help", cwd=tmp_path, timeout=300)
    assert proc.returncode == 0, proc.stderr
    for option in ("--out", "--stochastic", "--opset", "--overwrite"):
        assert option in proc.stdout
    assert "not safe to run on physical equipment" in " ".join(proc.stdout.split())
    listing = run_kiln("--help", cwd=tmp_path, timeout=300)
    assert any(line.split()[:1] == ["export"] for line in listing.stdout.splitlines())

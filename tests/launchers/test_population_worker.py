"""kiln.launchers.population_worker: what one population worker does with its members, and how it
reports each one.

References: the exit status a shell reports for a process ended by signal N, 128 + N (so a stopped
member's code is 130 for SIGINT and 143 for SIGTERM; a worker whose launcher is gone ends as after
SIGTERM); Pendulum-v1's registered 200-step episodes (Gymnasium); hand arithmetic in the comments.
How a member ends (done, failed, stopped) and that a worker leaves its process as it found it are
the project's requirements (DEVELOPERS.md, "Sweeps as populations").
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import signal
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import gymnasium as gym
import pytest
import torch

from kiln.config.presets import compose_config
from kiln.launchers.population_worker import Outcome, run_population
from tests.support.cli import TINY_RUN


def tiny(seed: int, *extra: str) -> dict:
    return compose_config("train", [*TINY_RUN, "log.progress=off", f"seed={seed}", *extra])


@pytest.fixture(autouse=True)
def no_user_presets(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("KILN_PRESETS", raising=False)


@pytest.fixture(scope="module")
def trained_pair(tmp_path_factory) -> Iterator[tuple[list[Path], list[Outcome], str, int, int]]:
    """Two members trained as one population in this process (joblib's single-worker case), with the
    launcher being this process and no stop note: their folders, outcomes and printed report, and
    torch's thread count before and after the call."""
    folder = tmp_path_factory.mktemp("population")
    dirs = [folder / "s0", folder / "s1"]
    threads = torch.get_num_threads()
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        outcomes = run_population([tiny(0), tiny(1)], dirs, os.getpid(), folder / "stop")
    after = torch.get_num_threads()
    torch.set_num_threads(threads)  # whatever happened, the next tests start from it
    yield dirs, outcomes, printed.getvalue(), threads, after


def test_members_that_finish_are_done_with_their_final_return(trained_pair) -> None:
    dirs, outcomes, printed, _, _ = trained_pair
    assert [o.kind for o in outcomes] == ["done", "done"]
    for run_dir, outcome in zip(dirs, outcomes):
        result = json.loads((run_dir / "result.json").read_text())
        assert outcome.value == result["final"]["return_eval"] and outcome.exit_code == 0
        assert result["population"] == 2 and result["steps"] == 300
        # Pendulum-v1's registered limit (Gymnasium) is the length of every evaluation episode.
        assert result["evaluation"]["length_max"] == gym.spec("Pendulum-v1").max_episode_steps == 200
        assert f"run folder   {run_dir}\n" in printed  # each member reported as `kiln train` reports a run
    assert printed.index(f"run folder   {dirs[0]}\n") < printed.index(f"run folder   {dirs[1]}\n")


def test_the_workers_process_keeps_its_thread_count(trained_pair) -> None:
    # threads=1 in the members' config: the worker may use it while it trains, not leave it behind
    # (with one worker, joblib trains in the user's own process).
    _, _, _, before, after = trained_pair
    assert after == before


def test_a_stop_before_the_population_starts_leaves_its_folders_untouched(tmp_path: Path, trained_pair) -> None:
    finished, _, _, _, _ = trained_pair
    note = tmp_path / "stop"
    note.write_text("SIGINT")
    fresh = tmp_path / "fresh"
    results_before = (finished[0] / "result.json").read_bytes()
    outcomes = run_population([tiny(0), tiny(2)], [finished[0], fresh], os.getpid(), note)
    # The finished member was finished before the stop: done; the other is stopped as after SIGINT.
    assert outcomes[0].kind == "done"
    assert outcomes[1] == Outcome("stopped", message="SIGINT before the population started",
                                  exit_code=128 + signal.SIGINT)  # fmt: skip
    assert not fresh.exists() and (finished[0] / "result.json").read_bytes() == results_before


def test_a_population_that_cannot_start_fails_every_member_with_the_one_line(tmp_path: Path) -> None:
    (tmp_path / "notes").write_text("a file where a folder should be")
    dirs = [tmp_path / "notes" / "a", tmp_path / "notes" / "b"]
    outcomes = run_population([tiny(0), tiny(1)], dirs, os.getpid(), tmp_path / "stop")
    assert [o.kind for o in outcomes] == ["failed", "failed"]
    assert all(o.exit_code == 2 for o in outcomes)  # bad input (README, "Bad input")
    assert outcomes[0].message == outcomes[1].message and "notes" in outcomes[0].message
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes"]


def test_a_worker_whose_launcher_is_gone_ends_its_process(tmp_path: Path) -> None:
    # Launcher pid 1 is not this worker's parent: the launcher counts as gone. The worker writes
    # nothing for its member, says why in one line and ends as after SIGTERM.
    code = (
        "import json, sys\n"
        "from pathlib import Path\n"
        "from kiln.launchers.population_worker import run_population\n"
        "raw = json.loads(sys.argv[1])\n"
        "run_population([raw], [Path('member')], 1, Path('stop'))\n"
        "print('returned')\n"
    )
    proc = subprocess.run([sys.executable, "-c", code, json.dumps(tiny(0))], cwd=tmp_path, check=False, capture_output=True,
                          text=True, timeout=300)  # fmt: skip
    assert proc.returncode == 128 + signal.SIGTERM, proc.stderr
    assert "returned" not in proc.stdout
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("kiln: stopped: the sweep's launcher is gone"), proc.stderr
    assert list(tmp_path.iterdir()) == []

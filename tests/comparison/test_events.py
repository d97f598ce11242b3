"""Reading scalars back from event files written in the test with torch's SummaryWriter."""

from pathlib import Path

import numpy as np
from torch.utils.tensorboard import SummaryWriter

from kiln.comparison.events import ScalarSeries, has_event_files, read_scalars


def test_reads_back_every_value_written(tmp_path: Path) -> None:
    writer = SummaryWriter(log_dir=str(tmp_path))
    returns = {0: -1200.5, 1000: -800.25, 2000: -410.0, 3000: -150.125}
    for step, value in returns.items():
        writer.add_scalar("return/eval", value, step)
    for step in range(0, 3001, 10):  # more points than TensorBoard's default reservoir keeps (1000)
        writer.add_scalar("actor/entropy_nats", step / 1000.0, step)
    writer.add_scalar("temperature/value", 0.1, 3000)
    writer.close()

    scalars = read_scalars(tmp_path)

    assert set(scalars) == {"return/eval", "actor/entropy_nats", "temperature/value"}
    # Values chosen exactly representable in float32 come back exactly (the test wrote them).
    np.testing.assert_array_equal(scalars["return/eval"].steps, list(returns))
    np.testing.assert_array_equal(scalars["return/eval"].values, list(returns.values()))
    # All 301 points kept: size_guidance 0 keeps every scalar instead of a sample.
    assert scalars["actor/entropy_nats"].steps.size == 301
    # Source: TensorBoard's Summary.Value.simple_value is a proto float (32-bit), so 0.1 reads back as
    # float32(0.1).
    assert scalars["temperature/value"].values[0] == float(np.float32(0.1))


def test_resumed_run_keeps_the_later_write_of_a_step(tmp_path: Path) -> None:
    first = SummaryWriter(log_dir=str(tmp_path))
    for step, value in [(0, 1.0), (100, 2.0), (200, 3.0), (300, 4.0)]:
        first.add_scalar("return/eval", value, step, walltime=1000.0 + step)
    first.close()
    second = SummaryWriter(log_dir=str(tmp_path))  # a resume from the step-100 checkpoint
    for step, value in [(200, 30.0), (300, 40.0), (400, 50.0)]:
        second.add_scalar("return/eval", value, step, walltime=5000.0 + step)
    second.close()

    series = read_scalars(tmp_path)["return/eval"]

    # Written above: steps 200 and 300 were rewritten later (larger wall time) by the second writer.
    np.testing.assert_array_equal(series.steps, [0, 100, 200, 300, 400])
    np.testing.assert_array_equal(series.values, [1.0, 2.0, 30.0, 40.0, 50.0])


def test_directory_without_event_files(tmp_path: Path) -> None:
    (tmp_path / "notes.txt").write_text("not a run")
    assert not has_event_files(tmp_path)
    assert read_scalars(tmp_path) == {}


def test_value_at_takes_the_last_value_at_or_before_a_step() -> None:
    series = ScalarSeries(np.array([0, 100, 200]), np.array([1.0, 2.0, 3.0]))
    # Hand-read from the series above.
    assert series.value_at(100) == (100, 2.0)
    assert series.value_at(150) == (100, 2.0)
    assert series.value_at(999) == (200, 3.0)
    assert series.value_at(-1) is None


def test_only_event_files_directly_inside_count(tmp_path: Path) -> None:
    # Written here: an event file one folder down (a nested run) belongs to that run, not to this one.
    writer = SummaryWriter(log_dir=str(tmp_path / "nested"))
    writer.add_scalar("return/eval", 1.0, 0)
    writer.close()
    assert not has_event_files(tmp_path) and read_scalars(tmp_path) == {}
    assert has_event_files(tmp_path / "nested")
    assert ScalarSeries(np.array([5, 9]), np.array([1.0, 2.0])).last_step == 9

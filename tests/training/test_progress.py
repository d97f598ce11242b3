"""Console progress (kiln.training.progress): one speed, labelled with its window; no stale figures
between lines; the time left by hand arithmetic.

What a first user hit (issue: rough edges): the bar showed the bar library's own rate beside Kiln's,
and line mode repeated the same training return and speeds at every evaluation. Project requirement,
no outside source; tqdm's ``bar_format`` fields are tqdm's documented ones.
"""

from kiln.training.progress import Progress


def _lines(capsys):
    return [line for line in capsys.readouterr().err.splitlines() if line.strip()]


def test_line_shows_one_speed_labelled_with_its_window(capsys):
    progress = Progress(total=2000, mode="lines", window=500)
    progress.set_window(500, 2950.0, 180.0, 0.5)
    progress.set_train(500, -1234.5)
    progress.set_eval(1000, -900.0)
    (line,) = _lines(capsys)
    assert "2950 env steps/s, 180 updates/s (last 500 steps)" in line
    assert line.count("steps/s") == 1 and "it/s" not in line
    assert "return train -1234.5, eval -900.0" in line
    assert "α 0.5" in line


def test_next_line_omits_figures_that_did_not_change(capsys):
    progress = Progress(total=3000, mode="lines", window=1000)
    progress.set_window(1000, 3000.0, None, None)
    progress.set_train(1000, -1500.0)
    progress.set_eval(1000, -1400.0)
    # No episode ended and no window closed before the next evaluation: only the new eval return.
    progress.set_eval(2000, -300.0)
    first, second = _lines(capsys)
    assert "train -1500.0" in first and "3000 env steps/s" in first
    assert "eval -300.0" in second
    assert "train" not in second and "steps/s" not in second and "-1500.0" not in second


def test_window_without_updates_shows_no_update_rate(capsys):
    progress = Progress(total=1000, mode="lines", window=100)
    progress.set_window(100, 5000.0, None, None)
    progress.set_eval(100, -1.0)
    (line,) = _lines(capsys)
    assert "updates/s" not in line and "α" not in line


def test_bar_format_has_no_library_rate():
    progress = Progress(total=10, mode="bar", window=5)
    try:
        assert "rate" not in progress.bar.bar_format
    finally:
        progress.close()


def test_time_left_is_the_elapsed_time_per_step_times_the_steps_to_go(capsys, monkeypatch):
    clock = iter([50.0, 80.0])  # started at 50 s; the evaluation line at 80 s
    monkeypatch.setattr("kiln.training.progress.time.perf_counter", lambda: next(clock))
    progress = Progress(total=4000, mode="lines", window=1000)
    progress.set_eval(1000, -10.0)
    (line,) = _lines(capsys)
    # Hand arithmetic: 30 s for 1000 steps, 3000 to go → 90 s left.
    assert line == "step 1000/4000 | return eval -10.0 | 30s elapsed, ~90s left"


def test_off_prints_nothing_and_auto_prints_lines_when_not_on_a_terminal(capsys):
    quiet = Progress(total=100, mode="off")
    quiet.set_window(50, 10.0, 5.0, 0.2)
    quiet.set_eval(50, -1.0)
    quiet.close()
    assert capsys.readouterr().err == ""
    # Under pytest's capture stderr is no terminal (sys.stderr.isatty() is False): lines, not a bar.
    auto = Progress(total=100, mode="auto")
    assert auto.mode == "lines" and auto.bar is None

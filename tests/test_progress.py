"""Progress reporting: a bar on a terminal, readable lines in a log, nothing when quiet."""

import io

from ctpore.progress import Progress


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def _run(progress, names=("read", "segment", "measure")):
    for name in names:
        with progress.step(name):
            pass


def test_log_stream_gets_one_line_per_step_start_and_end():
    log = io.StringIO()
    p = Progress(3, stream=log, label="ctpore")
    _run(p)
    lines = log.getvalue().splitlines()
    assert len(lines) == 6 and "\r" not in log.getvalue()
    assert lines[0] == "ctpore: [1/3] read ..."
    assert lines[-1].startswith("ctpore: [3/3] measure done in ")
    assert set(p.timings_s) == {"read", "segment", "measure"}


def test_terminal_gets_a_bar_that_reaches_the_total():
    term = _Terminal()
    p = Progress(3, stream=term, label="ctpore")
    assert p.bar
    _run(p)
    text = term.getvalue()
    assert "\r" in text and "3/3" in text and "measure" in text
    assert "done in" not in text  # no log lines on a terminal


def test_quiet_prints_nothing_but_still_times_the_steps():
    for stream in (io.StringIO(), _Terminal()):
        p = Progress(3, stream=stream, quiet=True)
        _run(p)
        assert stream.getvalue() == ""
        assert len(p.timings_s) == 3


def test_advance_counts_pieces_in_both_modes():
    log = io.StringIO()
    p = Progress(2, stream=log, label="ctpore batch")
    p.advance("p1 (lot_A): ok")
    p.advance("p2 (lot_A): ok")
    assert log.getvalue().splitlines() == ["ctpore batch: [1/2] p1 (lot_A): ok",
                                           "ctpore batch: [2/2] p2 (lot_A): ok"]
    term = _Terminal()
    p = Progress(2, stream=term, label="ctpore batch")
    p.advance("p1")
    p.advance("p2")
    assert "2/2" in term.getvalue()


def test_cli_is_quiet_in_ci(monkeypatch):
    from ctpore import cli

    monkeypatch.setenv("CI", "true")
    assert cli._in_ci()
    monkeypatch.setenv("CI", "")
    assert not cli._in_ci()

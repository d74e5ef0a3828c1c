"""Progress bars appear on a terminal only, and never with --quiet."""

from __future__ import annotations

import io

from sheetnet.progress import Progress


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_bar_draws_on_a_terminal_and_ends_the_line():
    stream = _Terminal()
    bar = Progress(4, "verifying", stream=stream)
    for done in range(5):
        bar(done)
    text = stream.getvalue()
    assert "verifying [" in text and "4/4" in text and text.endswith("\n")


def test_bar_is_silent_off_a_terminal_or_when_quiet():
    for stream, quiet in ((io.StringIO(), False), (_Terminal(), True)):
        bar = Progress(4, "training", quiet=quiet, stream=stream)
        bar(2)
        bar(4)
        assert stream.getvalue() == ""


def test_commands_print_no_bar_when_stderr_is_not_a_terminal(tmp_path, run_cli):
    from tests.conftest import write_csv

    data = write_csv(tmp_path / "d.csv", ["a", "label"], [[i / 10, i % 2] for i in range(10)])
    code, _, err = run_cli("train", data, "--target", "label", "--epochs", "3", "-o", tmp_path / "m.json")
    assert code == 0 and "[" not in err

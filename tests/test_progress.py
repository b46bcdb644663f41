"""Progress bars and step timings: on a terminal only, never with --quiet, timings with -v."""

from __future__ import annotations

import io
import re

from click.testing import CliRunner

import archivist
from archivist.cli import cli
from archivist.progress import Progress, RichProgress, make_progress
from builders import tiny_project

TIMING = re.compile(r"^\s*\d+\.\d{3} s  (\s*)(.+)$")


class Terminal(io.StringIO):
    """A stream that says it is a terminal."""

    def isatty(self):
        return True


def test_no_terminal_no_bars(monkeypatch):
    monkeypatch.delenv("TERM", raising=False)
    p = make_progress(stream=io.StringIO())
    assert type(p) is Progress
    assert type(make_progress(quiet=True, stream=Terminal())) is Progress
    monkeypatch.setenv("TERM", "dumb")
    assert type(make_progress(stream=Terminal())) is Progress


def test_bars_on_a_terminal(tmp_path, monkeypatch):
    monkeypatch.setenv("TERM", "xterm-256color")
    root = tiny_project(tmp_path)
    stream = Terminal()
    with make_progress(stream=stream) as progress:
        assert isinstance(progress, RichProgress) and progress.shows_bars
        archivist.check(root, progress=progress)
    out = stream.getvalue()
    assert "\x1b[" in out  # drawn with terminal control codes, then cleared (transient)
    assert "metadata rules" in out


def test_steps_and_timings_are_recorded(tmp_path):
    root = tiny_project(tmp_path)
    progress = Progress()
    report = archivist.check(root, progress=progress)
    steps = [t.label for t in progress.timings if t.depth == 0]
    items = [t.label for t in progress.timings if t.depth == 1]
    # one step per file read, as the manifest names it, and one per rule family
    assert "reading map.gpkg:units" in steps and "reading map.gpkg:lines" in steps and "reading legend.csv" in steps
    families = {archivist.get_rule(r).family for r in report.rules_run}
    assert {f"{f} rules" for f in families} <= set(steps)
    # one item per rule that ran
    assert sorted(items) == sorted(report.rules_run)
    assert all(t.seconds >= 0 for t in progress.timings)


def test_verbose_prints_timings(tmp_path):
    root = tiny_project(tmp_path)
    stream = io.StringIO()
    with make_progress(verbose=True, stream=stream) as progress:
        archivist.check(root, progress=progress)
    lines = stream.getvalue().splitlines()
    parsed = [TIMING.match(line) for line in lines]
    assert lines and all(parsed), lines
    labels = [m.group(2) for m in parsed]
    assert "reading map.gpkg:units" in labels and "metadata rules" in labels and "licence-unknown" in labels
    assert "\x1b[" not in stream.getvalue()  # not a terminal: no control codes
    assert labels[-1] == "total"


def test_nothing_printed_after_close(tmp_path):
    """A step still running when the run stops (a rule on a thread at Ctrl-C) ends after the display closed:
    its timing line is recorded but not printed below the total and the message that follows it."""
    stream = io.StringIO()
    progress = make_progress(verbose=True, stream=stream)
    step = progress.step("topology rules")
    step.__enter__()
    progress.close()
    step.__exit__(None, None, None)
    progress.close()
    lines = stream.getvalue().splitlines()
    assert [TIMING.match(line).group(2) for line in lines] == ["total"]
    assert [t.label for t in progress.timings] == ["topology rules"]


def test_cli_verbose_and_quiet(tmp_path):
    root = tiny_project(tmp_path)
    plain = CliRunner().invoke(cli, ["check", str(root), "--only", "metadata"])
    verbose = CliRunner().invoke(cli, ["check", str(root), "--only", "metadata", "-v"])
    quiet = CliRunner().invoke(cli, ["check", str(root), "--only", "metadata", "--quiet"])
    assert plain.exit_code == verbose.exit_code == quiet.exit_code == 0
    # the report on stdout is the same; timings go to stderr only
    assert plain.stdout == verbose.stdout == quiet.stdout
    assert plain.stderr == "" and quiet.stderr == ""
    timing_lines = verbose.stderr.splitlines()
    assert timing_lines and all(TIMING.match(line) for line in timing_lines)
    assert any(line.endswith("reading map.gpkg:units") for line in timing_lines)


# ECMA-48 ED (ESC [2J) and CUP (ESC [H), a CR, a BEL, and the UAX #9 override U+202E;
# "[/bold]" would be a closing tag to rich's markup parser.
HOSTILE = "reading \x1b[2J\x1b[Hx\r\x07\u202e[/bold][red].gpkg"
SHOWN = "reading \\x1b[2J\\x1b[Hx\\r\\x07\\u202e[/bold][red].gpkg"


def test_labels_from_data_are_shown_as_escapes_in_bars_and_timings(monkeypatch):
    monkeypatch.setenv("TERM", "xterm-256color")
    stream = Terminal()
    with make_progress(verbose=True, stream=stream) as progress:
        assert progress.shows_bars
        with progress.step(HOSTILE, total=1) as step:
            with step.item(HOSTILE):
                pass
    out = stream.getvalue()
    assert "\x1b[2J" not in out and "\u202e" not in out and "\x07" not in out
    assert SHOWN in out  # shown literally: not read as markup either
    assert progress.timings[0].label == HOSTILE  # the recorded timing keeps the label as given


def test_timing_lines_without_a_terminal_hold_no_control_character():
    stream = io.StringIO()
    with make_progress(verbose=True, stream=stream) as progress:
        with progress.step(HOSTILE):
            pass
    out = stream.getvalue()
    assert SHOWN in out
    assert [c for c in out if ord(c) < 0x20 and c != "\n"] == []

"""The entry point's messages: -q / -v / --log-file, warnings through logging, progress lines
where no bar is drawn, and the logging state restored after every command."""

import logging
import warnings

import pytest

from gpe.cli import progress
from gpe.cli.main import main

HOT = "evolution.damping=0.2"    # a protocol warning: damping far above the usual range


def test_default_shows_warnings_and_progress_lines_on_a_redirected_stderr(tiny, tmp_path,
                                                                          capsys):
    assert main(["run", str(tiny), "-o", str(tmp_path / "a.h5"), "--set", HOT]) == 0
    err = capsys.readouterr().err
    assert "warning: " in err and "damping gamma = 0.2" in err and "tiny.toml" in err
    # standard error is not a terminal here: no bar, but a progress line every tenth
    assert "ground state: " in err and "run: 10/10 hbar/mu (100%)" in err
    assert "\r" not in err
    assert "started" not in err            # INFO messages need -v


def test_quiet_shows_only_errors_and_verbose_says_what_is_done(tiny, tmp_path, capsys):
    assert main(["-q", "run", str(tiny), "-o", str(tmp_path / "q.h5"), "--set", HOT]) == 0
    assert capsys.readouterr().err == ""
    # after the subcommand as well; an error still shows under -q
    assert main(["run", str(tiny), "-q", "-o", str(tmp_path / "q.h5")]) == 2
    assert "error: " in capsys.readouterr().err
    assert main(["run", str(tiny), "-v", "-o", str(tmp_path / "v.h5")]) == 0
    err = capsys.readouterr().err
    assert "ground state converged after" in err and "complete, 6 frames" in err


def test_log_file_gets_times_messages_warnings_and_progress(tiny, tmp_path, capsys):
    log = tmp_path / "run.log"
    assert main(["--log-file", str(log), "-q", "run", str(tiny), "-o", str(tmp_path / "l.h5"),
                 "--set", HOT]) == 0
    assert capsys.readouterr().err == ""
    text = log.read_text()
    lines = text.splitlines()
    assert any(" WARNING " in ln and "damping gamma = 0.2" in ln for ln in lines)
    assert any(" INFO " in ln and "ground state converged" in ln for ln in lines)
    assert any("gpe.cli.progress: run: 10/10 hbar/mu (100%)" in ln for ln in lines)
    assert all(ln[:4].isdigit() for ln in lines)     # every line starts with its date
    assert " DEBUG " not in text                       # -vv adds the details
    assert main(["--log-file", str(log), "-q", "-vv", "run", str(tiny), "-o",
                 str(tmp_path / "l2.h5")]) == 0
    assert " DEBUG " in log.read_text() and log.read_text().startswith(text)  # appended


def test_unwritable_log_file_is_named(tiny, tmp_path, capsys):
    bad = tmp_path / "no" / "such" / "folder" / "run.log"
    assert main(["--log-file", str(bad), "describe"]) == 2
    err = capsys.readouterr().err
    assert str(bad) in err and "--log-file" in err


def test_logging_and_warning_state_is_restored(tiny, tmp_path):
    root = logging.getLogger()
    before = (list(root.handlers), root.level, warnings.showwarning, warnings.formatwarning,
              progress.SETTINGS["bars"])
    assert main(["-q", "--log-file", str(tmp_path / "x.log"), "describe"]) == 0
    assert main(["run", str(tiny), "-o", str(tmp_path / "bad.h5"), "--set",
                 "trap.radus_xi=3"]) == 2
    after = (list(root.handlers), root.level, warnings.showwarning, warnings.formatwarning,
             progress.SETTINGS["bars"])
    assert after == before


@pytest.mark.parametrize("argv", [["-v", "-q", "describe"], ["describe", "-vv"]])
def test_global_options_parse_before_and_after_the_command(argv, capsys):
    assert main(argv) == 0
    assert "observables stored" in capsys.readouterr().out

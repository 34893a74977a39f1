"""User strings reach the terminal literally: scenario names, plug-in names and messages that quote
them are never read as rich markup (issue 13, part 9). `name: "[/]"` once crashed `run` and `check`
(a closing tag with nothing to close), and `[bold]...[/bold]` was rendered instead of shown."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from conftest import scenario_dict, write_scenario
from sim.cli import main

NAMES = ["[/]", "[bold]loud[/bold]", "[red]x", "a [link=file:///etc]b"]


@pytest.fixture(autouse=True)
def wide_terminal(monkeypatch):
    """rich wraps at 80 columns off a terminal; long lines are easier to search unwrapped."""
    monkeypatch.setenv("COLUMNS", "400")


@pytest.mark.parametrize("name", NAMES)
def test_run_prints_the_scenario_name_literally(tmp_path, capsys, name):
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(name=name, trial={"duration": 0.05}))
    assert main(["run", str(path), "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert f"{name} - fixed_voltage" in out


def test_run_prints_a_plugin_message_and_the_out_folder_literally(tmp_path, capsys):
    shutil.copy(Path(__file__).parent / "plugins" / "simple_laws.py", tmp_path / "simple_laws.py")
    (tmp_path / "loud.py").write_text(
        "from sim.strategies import Strategy\n"
        "class Law(Strategy):\n    def decide(self, reading):\n"
        "        raise RuntimeError('[bold]no[/bold] [/]')\n")
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(strategy={"plugin": "loud.py:Law"},
                                                             trial={"duration": 0.05}))
    out_dir = tmp_path / "[i]out"
    assert main(["run", str(path), "--out", str(out_dir)]) == 0
    out = capsys.readouterr().out
    assert "RuntimeError at t = 0.0000 s: [bold]no[/bold] [/]" in out
    assert "[i]out/metrics.json" in out


def test_check_prints_the_scenario_name_literally(tmp_path, capsys):
    name = "[bold]loud[/bold] [/]"          # rendered, then a closing tag with nothing open: a crash
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(name=name, strategy={"kind": "lqr"},
                                                             trial={"duration": 0.5}))
    code = main(["check", str(path), "--out", str(tmp_path / "out"), "--trials", "1", "--workers", "1"])
    assert code in (0, 1)                   # pass or fail: judged, not crashed
    assert f"{name} - lqr:" in capsys.readouterr().out


def test_names_that_look_like_plot_math_are_drawn_literally(tmp_path, capsys):
    # matplotlib reads "$...$" as math: an unknown command in a phase or scenario name once made the
    # summary plot raise, and run ended in a traceback without metrics.json
    (tmp_path / "law.py").write_text(
        "from sim.strategies import Strategy\n"
        "class Law(Strategy):\n    goal = None\n    def decide(self, reading):\n"
        "        self.phase = '$\\\\nosuchcommand{$' if reading.t_s < 0.02 else '$x^2$'\n        return 0.0\n")
    path = write_scenario(tmp_path / "s.yaml", scenario_dict(name="$\\frac{$", strategy={"plugin": "law.py:Law"},
                                                             trial={"duration": 0.05}))
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out)]) == 0
    assert {p.name for p in out.iterdir()} >= {"metrics.json", "trace.csv", "summary.png"}
    assert "$\\frac{$ - law.py:Law" in capsys.readouterr().out

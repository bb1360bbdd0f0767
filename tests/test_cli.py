"""The `libration` command: demo, bench, version and usage errors."""
import subprocess
import sys

import pytest

import libration as lb
from libration.cli import main
from libration.demo import demo_system, run_demo


def test_demo_runs_and_summarises(capsys):
    assert main(["demo", "--years", "2", "--particles", "50"]) == 0
    out = capsys.readouterr().out
    assert "simulated time" in out and "730 days" in out
    assert "relative energy error" in out and "steps per second" in out


def test_demo_energy_error_is_small_and_bounded():
    result = run_demo(span_days=3652.5, belt_count=20)
    assert result.steps == 1826
    assert 0 < result.relative_energy_error < 1e-6
    assert result.method == "wisdom-holman"


def test_demo_system_is_invented_star_planets_and_belt():
    system = demo_system(belt_count=100)
    assert system.names[0] == "Calyra"
    assert system.n == system.n_active + 100
    assert system.units.name == "au-msun-day"


def test_version_and_usage_errors(capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["--version"])
    assert exit_info.value.code == 0
    assert lb.__version__ in capsys.readouterr().out
    assert main([]) == 2
    with pytest.raises(SystemExit) as exit_info:
        main(["no-such-command"])
    assert exit_info.value.code == 2


def test_console_script_is_installed():
    result = subprocess.run([sys.executable, "-m", "libration.cli", "--version"], capture_output=True,
                            text=True, check=False)
    assert result.returncode == 0 and result.stdout.startswith("libration ")

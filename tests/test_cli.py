"""The command line: thin over the API, user mistakes exit 2 with a message and no traceback."""

import subprocess
import sys

import pytest

from sim.cli import main

BAD_CONFIG = """
[experiment]
name = "typo"
[[allele]]
name = "a"
breeding = "iteroparous"
fecundity = 2.0
adult_survival = 1.3
juvenile_survival = 0.5
initial_count = 5
"""


def test_check_prints_the_resolved_experiment(capsys):
    assert main(["check", "configs/demo.toml"]) == 0
    out = capsys.readouterr().out
    assert "perennial: iteroparous" in out and "sweep points:" in out and "in all" in out


def test_bad_config_exits_2_naming_the_key(tmp_path, capsys):
    path = tmp_path / "bad.toml"
    path.write_text(BAD_CONFIG)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "allele[0].adult_survival must be in [0, 1]; got 1.3" in err
    assert "Traceback" not in err


def test_run_refuses_to_overwrite(tmp_path, capsys):
    out = tmp_path / "r.h5"
    out.write_text("x")
    assert main(["run", "configs/demo.toml", "-o", str(out)]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert out.read_text() == "x"


def test_missing_output_folder_is_reported(tmp_path, capsys):
    assert main(["run", "configs/demo.toml", "-o", str(tmp_path / "no" / "r.h5")]) == 2
    assert "does not exist" in capsys.readouterr().err


@pytest.mark.parametrize("argv", [["-m", "sim", "check", "configs/demo.toml"]])
def test_python_dash_m_sim(argv):
    done = subprocess.run([sys.executable, *argv], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert "replicates:" in done.stdout


def test_run_writes_results_and_prints_summary(tmp_path, capsys):
    cfg = tmp_path / "small.toml"
    cfg.write_text(open("configs/demo.toml").read().replace("replicates = ", "replicates = 3 #"))
    out = tmp_path / "r.h5"
    assert main(["run", str(cfg), "-o", str(out), "--quiet"]) == 0
    text = capsys.readouterr().out
    assert f"Results: {out}" in text and "fixed_fraction" in text
    assert f"Next: broodline compare {out} (the results against the analytic prediction)" in text


def test_a_trait_run_points_to_its_comparison_with_the_singular_efforts(tmp_path, capsys):
    out = tmp_path / "t.h5"
    assert main(["run", "configs/tallowcap-effort.toml", "-o", str(out), "--quiet", "--replicates", "1",
                 "--max-steps", "20", "--workers", "1"]) == 0
    assert f"Next: broodline compare {out} (the results against the singular efforts)" in capsys.readouterr().out


def test_a_refused_output_is_not_announced_as_running(tmp_path):
    # the "running OUT on N workers" line comes only once the results file is accepted
    from tests.runs_support import cli

    done = cli("run", "configs/demo.toml", "-o", "/nonexistent-folder/x.h5")
    assert done.returncode == 2
    assert "does not exist" in done.stderr and "running" not in done.stderr

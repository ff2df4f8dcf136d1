"""Where commands write: never over their own input, never onto a folder (common practice:
an output that replaces its input loses it for good, whatever --overwrite says)."""

import hashlib

import pytest

from sim.cli import main
from tests.runs_support import write_config


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    folder = tmp_path_factory.mktemp("outputs")
    config = write_config(folder, replicates=4)
    out = folder / "r.h5"
    assert main(["run", str(config), "-o", str(out), "--quiet", "--workers", "1"]) == 0
    return config, out


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("command", [
    ["run", "{config}", "-o", "{config}"],
    ["locate", "{config}", "--parameter", "allele.one-shot.fecundity", "-o", "{config}"],
    ["report", "{results}", "-o", "{results}"],
    ["compare", "{results}", "--csv", "{results}"],
    ["export", "{results}", "--what", "points", "-o", "{results}"],
])
def test_an_output_that_is_the_input_is_refused_even_with_overwrite(results, command, capsys):
    config, out = results
    before = {p: _digest(p) for p in (config, out)}
    argv = [a.format(config=config, results=out) for a in command] + ["--overwrite"]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "itself; writing there would destroy it" in err and err.count("\n") == 1
    assert {p: _digest(p) for p in (config, out)} == before


@pytest.mark.parametrize("command", [
    ["locate", "{config}", "--parameter", "allele.one-shot.fecundity", "-o", "{folder}"],
    ["report", "{results}", "-o", "{folder}"],
    ["compare", "{results}", "--csv", "{folder}"],
    ["export", "{results}", "--what", "points", "-o", "{folder}"],
])
def test_a_folder_given_as_an_output_file_is_named_as_such(results, command, tmp_path, capsys):
    config, out = results
    argv = [a.format(config=config, results=out, folder=tmp_path) for a in command] + ["--overwrite"]
    assert main(argv) == 2
    assert f"{tmp_path}: is a folder; give the file to write" in capsys.readouterr().err


@pytest.mark.parametrize("command", ["status", "compare", "report", "plot", "export"])
def test_a_folder_given_as_the_results_file_is_named_as_such(command, tmp_path, capsys):
    extra = {"report": ["-o", str(tmp_path / "r.html")], "plot": ["-o", str(tmp_path / "figs")],
             "export": ["--what", "points", "-o", str(tmp_path / "p.csv")]}.get(command, [])
    assert main([command, str(tmp_path), *extra]) == 2
    assert f"'{tmp_path}' is a folder, not a results file" in capsys.readouterr().err
    assert not (tmp_path / "figs").exists()


def test_demo_refuses_a_file_or_an_unbuildable_folder_in_one_line(tmp_path, capsys):
    taken = tmp_path / "taken"
    taken.write_text("x")
    assert main(["demo", "-o", str(taken)]) == 2
    assert "exists and is not a folder" in capsys.readouterr().err and taken.read_text() == "x"
    assert main(["demo", "-o", str(taken / "below")]) == 2
    err = capsys.readouterr().err
    assert "cannot create the folder" in err and "Errno" not in err


def test_demo_names_its_own_config_when_the_users_copy_is_broken(tmp_path, capsys):
    (tmp_path / "demo.toml").write_text('[experiment]\nname = "mine"\n')
    assert main(["demo", "-o", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert f"{tmp_path / 'demo.toml'} (the demo's own config; delete it for the shipped one): " in err
    assert "allele" in err

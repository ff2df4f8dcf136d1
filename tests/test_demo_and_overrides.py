"""The demo reruns from its own edited config and refuses to replace results; run overrides."""

import pytest

from sim.cli import main
from sim.store import read_attrs


def test_demo_reruns_its_own_edited_config_and_refuses_to_overwrite(tmp_path, capsys):
    out = tmp_path / "demo"
    out.mkdir()
    shipped = open("configs/demo.toml").read()
    edited = (shipped.replace("replicates = 1500", "replicates = 4")
              .replace("max_steps = 2000", "max_steps = 30"))
    sweep = shipped[shipped.index('"allele.one-shot.fecundity"'):].splitlines()[0]
    edited = edited.replace(sweep, '"allele.one-shot.fecundity" = [3.0, 6.0]')
    (out / "demo.toml").write_text(edited)
    assert main(["demo", "-o", str(out), "--quiet"]) == 0
    said = capsys.readouterr().out
    assert f"running the demo from its own config {out / 'demo.toml'}" in said
    config = read_attrs(out / "demo.h5")["config"]
    assert config["experiment"]["replicates"] == 4  # the edited file, not the shipped 1500
    before = (out / "demo.h5").read_bytes()
    assert main(["demo", "-o", str(out), "--quiet"]) == 2
    assert "pass --overwrite" in capsys.readouterr().err
    assert (out / "demo.h5").read_bytes() == before


def test_run_overrides_are_recorded(tmp_path, capsys):
    out = tmp_path / "o.h5"
    argv = ["run", "configs/demo.toml", "-o", str(out), "--quiet", "--workers", "1"]
    assert main([*argv, "--seed", "7", "--replicates", "2", "--max-steps", "5"]) == 0
    experiment = read_attrs(out)["config"]["experiment"]
    assert (experiment["seed"], experiment["replicates"], experiment["max_steps"]) == (7, 2, 5)
    assert main([*argv, "--overwrite", "--replicates", "0"]) == 2
    assert "experiment.replicates must be >= 1; got 0" in capsys.readouterr().err


@pytest.mark.parametrize("flag", ["--seed", "--replicates", "--max-steps"])
def test_run_override_flags_exist(flag, capsys):
    with pytest.raises(SystemExit):
        main(["run", "--help"])
    assert flag in capsys.readouterr().out


def test_an_override_of_a_swept_key_is_refused_naming_the_option_and_the_key(tmp_path, capsys):
    # the issue: --max-steps 5 on a config sweeping experiment.max_steps ran the swept values
    # while the results file recorded max_steps = 5
    config = tmp_path / "c.toml"
    config.write_text(open("configs/demo.toml").read().split("[sweep]")[0]
                      + '[sweep]\n"experiment.max_steps" = [10, 20]\n')
    out = tmp_path / "o.h5"
    argv = ["run", str(config), "-o", str(out), "--quiet", "--workers", "1", "--replicates", "2"]
    assert main([*argv, "--max-steps", "5"]) == 2
    assert capsys.readouterr().err.strip() == (
        "broodline run: error: --max-steps: experiment.max_steps is swept by the config (over 10, 20), "
        "so --max-steps 5 would be recorded but not run; remove --max-steps or the sweep of "
        "experiment.max_steps")
    assert not out.exists()
    assert main(argv) == 0  # an override of a key the config does not sweep still runs
    assert read_attrs(out)["config"]["experiment"]["replicates"] == 2

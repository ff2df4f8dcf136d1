"""What `broodline check` prints: the swept range where the base value would mislead."""

import pytest

from sim.describe import describe_experiment
from tests.invasion_configs import invasion_config


def test_swept_capacity_is_shown_as_swept():
    # the issue: `check` printed "K = 150" (the base value) when K was swept over 50 and 200
    text = describe_experiment(invasion_config(capacity=150.0, sweep={"density.capacity": [50, 200]}))
    assert "K swept over 50, 200" in text and "K = 150" not in text
    assert "(K = 150)" in describe_experiment(invasion_config(capacity=150.0))


def test_warnings_before_anything_runs(tmp_path, capsys):
    # adult_survival on a semelparous allele that breeds at age 1 (ignored), and a Ricker on
    # adult survival beside it: with the density factor at 0 the one-shot allele still grows
    # at B_s c = 4.5 x 0.5 = 2.25 > 1 (no adult survival to act on), so every replicate
    # would pass max_population. Both are said before the run, by `check` and by `run`.
    import warnings

    from sim.cli import main
    from sim.config import parse_config
    from sim.describe import ConfigWarning, config_warnings, preflight

    raw = invasion_config(form="ricker", acts_on="adult-survival", mutant_fecundity=4.5,
                          resident_count=40).model_dump(exclude_none=True)
    raw["allele"][1]["adult_survival"] = 0.4
    config = parse_config(raw)
    found = config_warnings(config)
    assert any(w.startswith("allele[1].adult_survival: ignored") for w in found)
    assert any("cannot regulate allele 'one-shot'" in w and "2.25 > 1" in w for w in found)
    with pytest.warns(ConfigWarning):
        preflight(config)
    assert config_warnings(invasion_config()) == []  # the resident's floor is exactly 1: regulated
    toml = tmp_path / "c.toml"
    toml.write_text(
        '[experiment]\nreplicates = 1\nmax_steps = 3\n[density]\nform = "ricker"\n'
        'acts_on = "adult-survival"\ncapacity = 50\n[[allele]]\nname = "a"\nbreeding = "iteroparous"\n'
        'fecundity = 2.0\nadult_survival = 0.5\njuvenile_survival = 0.5\ninitial_count = 5\n'
        '[[allele]]\nname = "b"\nbreeding = "semelparous"\nfecundity = 4.5\njuvenile_survival = 0.5\n'
        'initial_count = 5\n'
    )
    with warnings.catch_warnings():
        assert main(["run", str(toml), "-o", str(tmp_path / "o.h5"), "--quiet", "--workers", "1"]) == 0
    err = capsys.readouterr().err
    assert "broodline run: warning: density.acts_on = 'adult-survival' cannot regulate allele 'b'" in err
    assert main(["check", str(toml)]) == 0
    assert "warning: density.acts_on" in capsys.readouterr().out


@pytest.mark.parametrize(
    "section, key, value, message",
    [
        ("allele", "fecundity", "4.5",
         r"allele\[1\]\.fecundity must be a number \(written without quotes\); got '4.5'"),
        ("allele", "juvenile_survival", "0.5", r"allele\[1\]\.juvenile_survival must be a number"),
        ("density", "capacity", "100", r"density\.capacity must be a number \(written without quotes\); got '100'"),
        ("experiment", "replicates", "20", r"experiment\.replicates must be a whole number"),
    ],
)
def test_strings_where_numbers_belong_are_refused(section, key, value, message):
    # the issue: fecundity = "4.5" (a string) was accepted without a word
    from sim.config import ConfigError, parse_config

    raw = invasion_config().model_dump(exclude_none=True)
    if section == "allele":
        raw["allele"][1][key] = value
    else:
        raw[section][key] = value
    with pytest.raises(ConfigError, match=message):
        parse_config(raw)

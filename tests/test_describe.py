"""What `broodline check` prints: the swept range where the base value would mislead."""

import re

import pytest

from analysis.lab.toml_text import raw_toml_text
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


# keys a valid config sets that nothing reads: one warning each, from `check` and before `run`
def _base(**changes) -> dict:
    import copy

    from tests.conftest import BASE

    raw = copy.deepcopy(BASE)
    raw["experiment"].update(replicates=1, max_steps=3)
    for section, value in sorted(changes.items(), reverse=True):  # allele1 before allele0
        if section.startswith("allele") and value is None:
            del raw["allele"][int(section[-1])]
        elif section.startswith("allele"):
            raw["allele"][int(section[-1])].update(value)
        elif value is None:
            raw.pop(section, None)
        else:
            raw[section] = {k: v for k, v in {**raw.get(section, {}), **value}.items() if v is not None}
    return raw


IGNORED = [
    (dict(allele0={"initial_count": 50}),
     "allele[0].initial_count: ignored: [invasion] sets the starting counts"),
    (dict(allele1={"adult_survival": 0.9}),
     "allele[1].adult_survival: ignored: 'one-shot' is semelparous and breeds at age 1"),
    (dict(density={"form": "none", "acts_on": "fecundity", "capacity": None}, invasion={"resident_count": 20}),
     "density.acts_on: ignored: form = 'none' has no density dependence"),
    (dict(density={"form": "none", "acts_on": None, "counted": "breeders", "capacity": None},
          invasion={"resident_count": 20}),
     "density.counted: ignored: form = 'none' has no density dependence"),
    (dict(density={"form": "none", "acts_on": None, "capacity": 50}, invasion={"resident_count": 20}),
     "density.capacity: ignored: form = 'none' has no density dependence"),
    (dict(allele0={"initial_count": 10}, allele1=None, invasion=None, mutation={"rate": 0.5}),
     "mutation.rate: ignored: 'perennial' is the only allele, so an offspring has no other allele"),
]


@pytest.mark.parametrize("changes, warning", IGNORED)
def test_an_ignored_key_is_said_by_check_and_before_a_run(changes, warning, tmp_path, capsys):
    from sim.cli import main
    from sim.config import parse_config
    from sim.describe import ConfigWarning, config_warnings, preflight

    raw = _base(**changes)
    config = parse_config(raw)
    assert [w for w in config_warnings(config) if "ignored" in w] == [w for w in config_warnings(config)
                                                                       if w.startswith(warning)]
    with pytest.warns(ConfigWarning, match=re.escape(warning)):
        preflight(config)
    path = tmp_path / "c.toml"
    path.write_text(raw_toml_text(raw))
    assert main(["check", str(path)]) == 0
    assert f"warning: {warning}" in capsys.readouterr().out


def test_a_key_used_at_some_sweep_point_is_not_said_to_be_ignored():
    from sim.config import parse_config
    from sim.describe import config_warnings

    # adult_survival is the survival before breeding where the swept maturity_age is 2
    raw = _base(allele1={"adult_survival": 0.9}, sweep={"allele.one-shot.maturity_age": [1, 2]})
    assert not any("ignored" in w for w in config_warnings(parse_config(raw)))
    raw["sweep"] = {"allele.one-shot.fecundity": [3.0, 4.0]}
    assert any("allele[1].adult_survival: ignored" in w for w in config_warnings(parse_config(raw)))
    # acts_on is used where the swept form is not "none"
    raw = _base(density={"form": "ricker", "acts_on": "fecundity"}, invasion={"resident_count": 20},
                sweep={"density.form": ["ricker", "none"]})
    assert not any("ignored" in w for w in config_warnings(parse_config(raw)))
    raw["sweep"] = {"density.form": ["none"]}
    assert [w for w in config_warnings(parse_config(raw)) if "ignored" in w] == [
        "density.acts_on: ignored: form = 'none' has no density dependence",
        "density.capacity: ignored: form = 'none' has no density dependence"]

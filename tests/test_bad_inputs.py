"""Hostile configs (issue 11): each is refused with one message naming its key, or runs cleanly.

Nothing here is a statistical check: every case is a config that once passed ``check`` and
then crashed, ran out of memory or ran to silent nonsense.
"""

import copy

import pytest

from sim.cli import main
from sim.config import ConfigError, load_config, parse_config
from tests.conftest import BASE


def _raw(**changes):
    """BASE with ``section__key`` (``allele0__key``: allele 0's) or a whole ``section`` (``allele1``:
    allele 1) set; None deletes."""
    raw = copy.deepcopy(BASE)
    for where, value in changes.items():
        section, _, key = where.partition("__")
        if not key:
            if section.startswith("allele"):
                raw["allele"][int(section[-1])] = value
            else:
                raw[section] = value
            continue
        node = raw["allele"][int(section[-1])] if section.startswith("allele") else \
            raw.setdefault(section, {})
        if value is None:
            node.pop(key, None)
        else:
            node[key] = value
    return raw


STRICT = [
    (dict(experiment__replicates="20"), r"experiment\.replicates must be a whole number .*got '20'"),
    (dict(experiment__seed=True), r"experiment\.seed must be a whole number, not true or false"),
    (dict(experiment__replicates=20.0), r"experiment\.replicates"),
    (dict(allele1__fecundity="4.5"), r"allele\[1\]\.fecundity must be a number .*got '4\.5'"),
    (dict(density__capacity=False), r"density\.capacity must be a number, not true or false"),
    (dict(invasion__mutant_count="1"), r"invasion\.mutant_count must be a whole number"),
    (dict(invasion__resident_count=True), r"invasion\.resident_count must be 'equilibrium' or"),
]

NOT_FINITE = [
    (dict(allele1__fecundity=float("nan")), r"allele\[1\]\.fecundity must be a finite number; got nan"),
    (dict(allele0__fecundity=float("inf")), r"allele\[0\]\.fecundity must be a finite number; got inf"),
    (dict(allele1__juvenile_survival=float("nan")), r"allele\[1\]\.juvenile_survival must be a finite"),
    (dict(density__capacity=float("inf")), r"density\.capacity must be a finite number"),
    (dict(mutation__rate=float("nan")), r"mutation\.rate must be a finite number"),
    (dict(allele1={"name": "one-shot", "breeding": "table", "fecundity": [0.0, float("nan")],
                   "adult_survival": [0.5, 0.5], "juvenile_survival": 0.5}),
     r"allele\[1\]\.fecundity\[1\] must be a finite number; got nan"),
    (dict(sweep={"allele.one-shot.fecundity": [3.0, float("nan")]}),
     r"sweep point 1 \(allele\.one-shot\.fecundity = nan\): allele\[1\]\.fecundity must be a finite"),
]

BOUNDS = [
    (dict(experiment__replicates=2**70), r"experiment\.replicates must be <= 2147483647"),
    (dict(experiment__seed=2**64), r"experiment\.seed must be <= 18446744073709551615"),
    (dict(experiment__max_steps=2**40), r"experiment\.max_steps must be <= 2147483647"),
]


def _refused(changes, message):
    raw = _raw(**changes)
    with pytest.raises(ConfigError, match=message) as err:
        parse_config(raw)
    return err.value


@pytest.mark.parametrize("changes, message", STRICT + NOT_FINITE + BOUNDS)
def test_refused_naming_the_key(changes, message):
    _refused(changes, message)


def test_a_sweep_too_large_to_hold_is_refused_before_it_is_expanded():
    err = _refused(dict(sweep={"allele.one-shot.fecundity": [1.0] * 1000,
                               "density.capacity": [50.0] * 1000}), r"sweep: 1,000,000 points; at most")
    assert len(err.problems) == 1


def test_a_config_that_is_not_text(tmp_path):
    path = tmp_path / "binary.toml"
    path.write_bytes(b"[experiment]\nname = '\xe9t\xe9'\n\x00\xff\xfe")
    with pytest.raises(ConfigError, match=r"binary\.toml: not a text config \(TOML is UTF-8"):
        load_config(path)


def test_a_config_path_that_is_a_folder(tmp_path, capsys):
    with pytest.raises(ConfigError, match=r"is a folder, not a file"):
        load_config(tmp_path)
    assert main(["check", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err

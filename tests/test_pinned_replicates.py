"""Replicates are drawn today exactly as version 0.2.0 drew them.

``tests/data/replicates_v0_2_0.json`` holds what version 0.2.0 (commit def1913) wrote for each
example config of ``configs/``, and for the demo on the ``counts`` and ``agents`` engines, run
small: the config text it ran, every replicate's outcome, winner, steps, fixation step and final
census, and a sha256 digest of each census-record and year-type dataset.
``tests/data/pin_replicates.py`` wrote it from that checkout and names the cases; its docstring
gives the command. The test runs the stored config text, so editing an example config does not
move the pin.

Why: a results file is resumed across versions and compared across worker counts, batch sizes
and engines, and performance work (batching, compiled passes, worker processes) must never
change a draw. A deliberate change of the random stream must come with a new version (resuming
then warns that draws may differ) and new pinned data, written with the command in
``pin_replicates.py`` and named in the commit.
"""

import argparse
import importlib.util
import json
from pathlib import Path

import pytest

from sim.cli.run import with_overrides
from sim.config import load_config
from sim.experiment import run_experiment

DATA = Path(__file__).resolve().parent / "data"


def _pinning():
    spec = importlib.util.spec_from_file_location("pin_replicates", DATA / "pin_replicates.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


PIN = _pinning()
PINNED = json.loads((DATA / "replicates_v0_2_0.json").read_text())


def test_every_case_is_pinned():
    assert list(PINNED) == list(PIN.CASES)


@pytest.mark.parametrize("name", list(PIN.CASES))
def test_replicates_are_drawn_as_version_0_2_0_drew_them(name, tmp_path):
    expected = PINNED[name]
    path = tmp_path / f"{name}.toml"
    path.write_text(expected["config"])
    # the config as `broodline run --replicates R --max-steps M` makes it (what the pin ran)
    args = argparse.Namespace(seed=None, replicates=expected["replicates"],
                              max_steps=expected["max_steps"])
    config = with_overrides(load_config(path), args)
    out = tmp_path / f"{name}.h5"
    run_experiment(config, out, progress=False)

    got = PIN.read_pinned(out)
    for column, values in expected["columns"].items():
        assert got["columns"][column] == values, f"{name}: /replicates/{column} differs from 0.2.0's"
    assert got["digests"] == expected["digests"], f"{name}: census records or year types differ"

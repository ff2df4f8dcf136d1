"""The documentation: its generated reference can be generated, and it builds with warnings as errors.

The config reference (docs/config-reference.rst) is generated from the schema
and the JSON key tables (docs/commands.md) from ``analysis.commands.JSON_KEYS``
by docs/_ext/broodline_docs.py, so these tests hold the sources of those pages
to account: every schema field has a description, every validator says what it
allows, and the documented JSON keys are exactly the keys the commands write.
"""

import importlib.util
import json
import shutil
import subprocess
import sys
import typing
from pathlib import Path

import pytest
from pydantic import BaseModel
from pydantic.functional_validators import AfterValidator

from analysis.commands import JSON_KEYS, SWEPT
from analysis.lab.toml_text import toml_text
from sim.cli import main
from sim.config.schema import Config, field_descriptions
from tests.invasion_configs import SMALL_SWEEP, invasion_config, write_small_results

DOCS = Path(__file__).resolve().parent.parent / "docs"
SWEPT_PATH = "allele.one-shot.fecundity"  # the swept path of the configs below
# `linked` is written only for a threshold along a [[sweep.linked]] group (ThresholdResult.as_dict)
WRITTEN_ONLY_SOMETIMES = {("threshold", "thresholds"): {"linked"}, ("threshold", ""): {"sensitivities"}}


def _models(model: type[BaseModel], seen=None) -> list[type[BaseModel]]:
    """``model`` and every model its fields hold (sections, tables of sections)."""
    seen = [] if seen is None else seen
    if model in seen:
        return seen
    seen.append(model)
    for field in model.model_fields.values():
        for t in (field.annotation, *typing.get_args(field.annotation)):
            if isinstance(t, type) and issubclass(t, BaseModel):
                _models(t, seen)
    return seen


def _validators(annotation) -> list:
    """The AfterValidator functions anywhere inside a field's annotation."""
    found = []
    if typing.get_origin(annotation) is typing.Annotated:
        found += [m.func for m in typing.get_args(annotation)[1:] if isinstance(m, AfterValidator)]
    for arg in typing.get_args(annotation):
        found += _validators(arg)
    return found


def test_every_schema_field_has_a_description():
    missing = [f"{m.__name__}.{name}" for m in _models(Config)
               for name, about in field_descriptions(m).items() if not about.strip()]
    assert not missing, (
        "schema fields without a description (add a docstring under each field in "
        f"sim/config/schema.py; the config reference is generated from them): {missing}"
    )


def test_every_value_validator_says_what_it_allows():
    funcs = {f for m in _models(Config) for field in m.model_fields.values()
             for f in _validators(field.annotation) + [v.func for v in field.metadata if isinstance(v, AfterValidator)]}
    assert funcs, "the schema's validators were not found: the test would check nothing"
    undocumented = [f.__qualname__ for f in funcs if not (f.__doc__ or "").strip()]
    assert not undocumented, f"give these validators a one-line docstring of what they allow: {undocumented}"


def _check_keys(command: str, part: str, written: set[str]) -> None:
    documented = set(JSON_KEYS[command][part])
    written = {SWEPT if key == SWEPT_PATH else key for key in written}
    sometimes = WRITTEN_ONLY_SOMETIMES.get((command, part), set())
    assert written <= documented, f"{command} --json {part or 'top'}: undocumented keys {written - documented}"
    assert documented - sometimes <= written, (
        f"{command} --json {part or 'top'}: documented but not written {documented - sometimes - written}"
    )


def test_threshold_json_keys_are_the_documented_ones(tmp_path, capsys):
    path = tmp_path / "exp.toml"
    config = invasion_config(capacity=30.0, sweep={SWEPT_PATH: SMALL_SWEEP})
    path.write_text(toml_text(config))
    assert main(["threshold", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    _check_keys("threshold", "", set(data))
    _check_keys("threshold", "points", set(data["points"][0]))
    _check_keys("threshold", "thresholds", set(data["thresholds"][0]))
    assert main(["threshold", str(path), "--json", "--sensitivities"]) == 0
    data = json.loads(capsys.readouterr().out)
    _check_keys("threshold", "", set(data))
    assert data["sensitivities"] and all(set(row) == set(data["sensitivities"][0]) for row in data["sensitivities"])
    _check_keys("threshold", "sensitivities", set(data["sensitivities"][0]))


def _check_environment_keys(command: str, part: str, written: set[str]) -> None:
    """With [environment]: the documented keys, less the finite-N ones, plus the added ones."""
    from analysis.fixation import COLUMNS

    added = set(JSON_KEYS[command][f"{part}, with [environment]"])
    documented = (set(JSON_KEYS[command][part]) - set(COLUMNS)) | added
    written = {SWEPT if key == SWEPT_PATH else key for key in written}
    sometimes = WRITTEN_ONLY_SOMETIMES.get((command, part), set())
    assert written <= documented, f"{command} --json {part}: undocumented keys {written - documented}"
    assert documented - sometimes <= written, f"{command} --json {part}: not written {documented - sometimes - written}"


def test_json_keys_with_year_types_are_the_documented_ones(tmp_path, capsys):
    from tests.invasion_configs import wet_and_dry

    config = wet_and_dry(capacity=30.0, replicates=4, max_steps=200, sweep={SWEPT_PATH: [3.0, 6.0]})
    path = tmp_path / "years.toml"
    path.write_text(toml_text(config))
    assert main(["threshold", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    _check_environment_keys("threshold", "points", set(data["points"][0]))
    _check_environment_keys("threshold", "thresholds", set(data["thresholds"][0]))
    results = tmp_path / "years.h5"
    assert main(["run", str(path), "-o", str(results), "--quiet", "--workers", "1"]) == 0
    capsys.readouterr()
    assert main(["compare", str(results), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    _check_environment_keys("compare", "points", set(data["points"][0]))


def test_compare_json_keys_are_the_documented_ones(tmp_path, capsys):
    results = write_small_results(tmp_path / "small.h5", replicates=10)
    assert main(["compare", str(results), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    _check_keys("compare", "", set(data))
    _check_keys("compare", "points", set(data["points"][0]))
    _check_keys("compare", "thresholds", set(data["thresholds"][0]))


def _missing_docs_requirements() -> list[str]:
    return [name for name in ("sphinx", "myst_parser", "numpydoc") if importlib.util.find_spec(name) is None]


def test_the_docs_build_offline_with_warnings_as_errors(tmp_path):
    missing = _missing_docs_requirements()
    if missing:
        pytest.skip(f"the docs build needs {', '.join(missing)}: pip install '.[docs]' (the test extra includes it)")
    out = tmp_path / "html"
    run = subprocess.run(
        [sys.executable, "-m", "sphinx", "-W", "--keep-going", "-q", "-b", "html", str(DOCS), str(out),
         "-d", str(tmp_path / "doctrees")],
        capture_output=True, text=True, timeout=600,
    )
    assert run.returncode == 0, f"sphinx-build failed:\n{run.stdout}\n{run.stderr}"
    page = (out / "config-reference.html").read_text()
    # the generated reference is there, with a key, its range and its description
    assert "juvenile_survival" in page and "in [0, 1]" in page and "survival from offspring to age 1" in page
    assert "establishment_probability" in (out / "commands.html").read_text()
    shutil.rmtree(out)

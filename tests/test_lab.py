"""The lab's session logic (no browser): controls, replicates, tally, theory panel, saving."""

import copy
import tomllib

import numpy as np
import pytest
from conftest import BASE, make_config
from runs_support import assert_same_datasets

from analysis import predict, threshold, wilson_interval
from analysis.lab.controls import control_of, controls, page_raw
from analysis.lab.session import BATCH, LabSession, mutant_frequency
from analysis.lab.theory import closed_form_threshold
from analysis.lab.toml_text import toml_text
from analysis.sweep import threshold_at
from sim.cli import main
from sim.config import (
    AlleleSection,
    ConfigError,
    DensitySection,
    EnvironmentSection,
    ExperimentSection,
    InvasionSection,
    TradeOffSection,
    YearSection,
    load_config,
    parse_config,
    sweep_points,
)
from sim.replicates import run_replicate, run_replicates


@pytest.fixture
def session():
    return LabSession(make_config(experiment={"replicates": 12}))


def test_starts_from_the_demo_dropping_its_sweep():
    s = LabSession(load_config("configs/demo.toml"))
    assert "sweep" not in s.raw and s.config.sweep is None
    assert s.view()["settings"]["mutant.fecundity"] == 4.0


def test_a_config_without_invasion_is_refused():
    raw = copy.deepcopy(BASE)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 10
    with pytest.raises(ValueError, match=r"invasion: the lab needs an \[invasion\] table"):
        LabSession(parse_config(raw))


@pytest.mark.parametrize("key, value, toml_key", [
    ("mutant.juvenile_survival", "1.3", ("allele", 1, "juvenile_survival", 1.3)),
    ("resident.fecundity", "-2", ("allele", 0, "fecundity", -2)),
    ("mutant.maturity_age", "0", ("allele", 1, "maturity_age", 0)),
    ("density.capacity", "0", ("density", None, "capacity", 0)),
    ("density.form", "ceiling", ("density", None, "form", "ceiling")),
    ("invasion.mutant_count", "abc", ("invasion", None, "mutant_count", "abc")),
    ("experiment.replicates", "0", ("experiment", None, "replicates", 0)),
])
def test_controls_are_refused_with_the_toml_messages(session, key, value, toml_key):
    # the same value written in a TOML file gives the same messages
    raw = copy.deepcopy(session.raw)
    section, index, name, typed_value = toml_key
    (raw[section][index] if index is not None else raw[section])[name] = typed_value
    if key == "density.form":  # a ceiling cannot act on fecundity: make the clash as in the file
        session.update({"density.acts_on": "fecundity"})
        raw["density"]["acts_on"] = "fecundity"
    with pytest.raises(ConfigError) as from_toml:
        parse_config(tomllib.loads(_plain_toml(raw)))
    assert session.update({key: value}) == from_toml.value.problems
    assert control_of(session.problems[0], session.raw) == key if key != "density.form" else "density.acts_on"


def _plain_toml(raw: dict) -> str:
    lines = []
    for section, value in raw.items():
        for table in value if isinstance(value, list) else [value]:
            lines.append(f"[[{section}]]" if isinstance(value, list) else f"[{section}]")
            lines += [f"{k} = {v!r}".replace("'", '"') for k, v in table.items()]
    return "\n".join(lines)


def test_invalid_settings_block_runs_and_a_fix_restores_them(session):
    assert session.update({"mutant.breeding": "iteroparous"}) == [
        "allele[1].adult_survival: required for an iteroparous schedule"]
    assert not session.step_season() and not session.run_many(3)
    assert session.update({"mutant.adult_survival": "0.4"}) == []
    assert session.config.allele[1].breeding == "iteroparous" and session.step_season()


def test_a_table_schedule_is_edited_as_comma_separated_ages():
    s = LabSession(load_config("configs/cinderwort-ages.toml"))
    assert s.view()["settings"]["resident.fecundity"] == [0.0, 1.5, 3.0, 4.0]
    assert s.update({"resident.fecundity": "0, 1.5, 3"}) == [
        "allele[0].adult_survival: table lists must be of equal length; fecundity has 3 ages, adult_survival 4"]
    assert s.update({"resident.adult_survival": "0.6, 0.7, 0.6"}) == []
    assert s.config.allele[0].fecundity == [0.0, 1.5, 3.0]


def test_a_resident_without_equilibrium_blocks_runs(session):
    # semelparous resident with B c = 2 x 0.5 = 1: growth rate 1 at low density, no equilibrium
    theory, config = session.theory, session.config
    problems = session.update({"resident.breeding": "semelparous"})
    assert len(problems) == 1 and "growth rate at low density is 1 <= 1" in problems[0]
    assert not session.step_season() and (session.theory, session.config) == (theory, config)
    assert session.update({"resident.fecundity": "3"}) == [] and session.step_season()


def test_moving_a_control_updates_the_theory_and_discards_replicates(session):
    session.run_many(3)
    session.wait()
    assert session.tally().n == 3
    before = session.theory.prediction["invasion_fitness"]
    session.update({"mutant.fecundity": "5"})
    assert session.tally().n == 0 and session.generation == 1
    expected = predict(make_config(allele=[BASE["allele"][0], {**BASE["allele"][1], "fecundity": 5}]))
    assert session.theory.prediction["invasion_fitness"] == pytest.approx(expected.invasion_fitness, rel=1e-12)
    assert session.theory.prediction["invasion_fitness"] != before


def test_seasons_step_the_replicate_run_replicate_gives(session):
    session.update({"density.capacity": "30", "mutant.fecundity": "6"})
    point, seed = sweep_points(session.config)[0], session.config.experiment.seed
    expected = [run_replicate(point, r, seed) for r in range(3)]
    seen = []  # (replicate, season, census) after each click
    while session.tally().n < 3:
        session.step_season()
        shown = session.view()["shown"]
        if shown["line"] is not None:
            seen.append((shown["replicate"], shown["season"], np.array(shown["census"])))
    for r, season, census in seen:
        row = np.flatnonzero(expected[r].record_steps == season)[0]
        assert np.array_equal(census, expected[r].trajectory[row]), (r, season)
    for got, want in zip(session.stored_results(), expected, strict=True):
        assert (got.outcome, got.steps, got.final_census) == (want.outcome, want.steps, want.final_census)
    assert [r for r, s, _ in seen if s == 0] == [0, 1, 2]


def test_one_replicate_in_the_worker(session):
    assert session.run_one()
    session.wait()
    want = run_replicate(sweep_points(session.config)[0], 0, session.config.experiment.seed)
    got = list(session.stored_results())
    assert len(got) == 1 and got[0].outcome == want.outcome and got[0].steps == want.steps


def test_stop_ends_a_run_between_batches(session):
    session.update({"density.capacity": "400"})
    session.run_many(100 * BATCH)
    session.stop()
    n = session.tally().n
    assert not session.running and n < 100 * BATCH and n % BATCH == 0


def test_tally_and_lines_of_n_replicates(session):
    session.run_many(25)
    session.wait()
    results = run_replicates(sweep_points(session.config)[0], range(25), session.config.experiment.seed)
    fixed = sum(r.outcome == "mutant-fixed" for r in results)
    lost = sum(r.outcome == "mutant-lost" for r in results)
    t = session.tally()
    assert (t.fixed, t.lost, t.unresolved) == (fixed, lost, 25 - fixed - lost)
    assert t.estimate == wilson_interval(fixed, 25)
    view = session.view()
    assert [line["outcome"] for line in view["lines"]] == [r.outcome for r in results]
    mutant = session.config.allele_index("one-shot")
    freq = mutant_frequency(results[4].trajectory, mutant)
    assert view["lines"][4]["freq"][-1] == (None if np.isnan(freq[-1]) else round(freq[-1], 4))
    assert view["running_tally"]["high"][-1] == t.estimate.high
    assert session.view(since=20, generation=view["generation"])["lines"] == view["lines"][20:]


def test_mutant_frequency_by_age_and_by_allele():
    counts = np.array([[[3, 1], [1, 0]], [[0, 0], [0, 0]], [[0, 0], [2, 2]]])
    assert np.allclose(mutant_frequency(counts, 1), [0.2, np.nan, 1.0], equal_nan=True)
    assert np.allclose(mutant_frequency(counts.sum(axis=2), 1), [0.2, np.nan, 1.0], equal_nan=True)


def test_saved_files_are_the_replicates_broodline_run_gives(session, tmp_path):
    session.update({"mutant.fecundity": "5.5", "experiment.replicates": "7"})
    session.step_season()  # a replicate opened a season at a time is run whole by the batch
    session.run_many()
    session.wait()
    session.run_many(4)
    session.wait()
    saved = session.save(tmp_path / "page.toml", tmp_path / "page.h5")
    assert load_config(saved.config).experiment.replicates == 11
    assert main(["check", str(saved.config)]) == 0
    assert main(["run", str(saved.config), "-o", str(tmp_path / "cli.h5"), "--quiet", "--workers", "1"]) == 0
    assert_same_datasets(saved.results, tmp_path / "cli.h5")  # bit for bit
    assert main(["compare", str(saved.results)]) == 0  # plot and report read it with the same reader
    with pytest.raises(FileExistsError, match="exists"):
        session.save(tmp_path / "page.toml", tmp_path / "page.h5")


def test_saving_without_replicates_writes_the_config_only(session, tmp_path):
    saved = session.save(tmp_path / "c.toml", tmp_path / "c.h5")
    assert saved.results is None and not (tmp_path / "c.h5").exists()
    assert load_config(saved.config) == session.saved_config()


@pytest.mark.parametrize("path", ["configs/demo.toml", "configs/cinderwort-ages.toml",
                                  "configs/nookshell-crevices.toml"])
def test_toml_text_reads_back_to_the_same_config(path):
    config = load_config(path)
    assert parse_config(tomllib.loads(toml_text(config, header="a line"))) == config


@pytest.mark.parametrize("density, closed", [
    # B_i = 2, P = 0.5, c = 0.5 (DESIGN.md's worked example):
    ({"form": "beverton-holt", "acts_on": "recruitment"}, 4.0),  # B_i / (1 - P), Mylius & Diekmann 1995
    ({"form": "ricker", "acts_on": "fecundity"}, 4.0),
    ({"form": "ceiling", "acts_on": "recruitment"}, 4.0),
    ({"form": "beverton-holt", "acts_on": "all-survival"}, 3.0),  # B_i + P / c, Mylius & Diekmann 1995
    ({"form": "ceiling", "acts_on": "all-survival"}, 3.0),
    ({"form": "none"}, 3.0),  # Charnov & Schaffer 1973
])
def test_closed_form_threshold_against_the_numerical_one(density, closed):
    config = make_config(density={"acts_on": None, **density},
                         invasion={"resident_count": 50} if density["form"] == "none" else {})
    form = closed_form_threshold(config)
    assert form.value == pytest.approx(closed, rel=1e-12)
    numeric = threshold(config, "allele.one-shot.fecundity")
    assert numeric.converged and numeric.value == pytest.approx(form.value, abs=1e-8)


def test_closed_form_on_adult_survival_and_where_none_applies():
    # on adult survival the resident needs B_i c < 1: B_i = 1.5, P = 0.8, c = 0.5; threshold 1 / c
    config = make_config(density={"acts_on": "adult-survival"}, allele=[
        {"name": "perennial", "breeding": "iteroparous", "fecundity": 1.5, "adult_survival": 0.8,
         "juvenile_survival": 0.5}, BASE["allele"][1]])
    assert closed_form_threshold(config).value == 2.0
    assert threshold(config, "allele.one-shot.fecundity").value == pytest.approx(2.0, abs=1e-8)
    later = make_config(allele=[BASE["allele"][0], {**BASE["allele"][1], "maturity_age": 2,
                                                    "adult_survival": 0.9}])
    assert closed_form_threshold(later) is None


def test_every_control_names_a_schema_key():
    markov = page_raw(load_config("configs/fenmarrow-hopper.toml"))
    markov["environment"].update(switching="markov", transitions=[[0.7, 0.3], [0.4, 0.6]])
    for year in markov["environment"]["year"]:
        year.pop("probability")
    parse_config(markov)  # a valid config
    effort = page_raw(make_config(tradeoff={"max_fecundity": 4.0, "max_adult_survival": 0.9}, allele=[
        {"name": "perennial", "breeding": "effort", "effort": 0.3, "juvenile_survival": 0.5},
        {"name": "one-shot", "breeding": "effort", "effort": 0.6, "juvenile_survival": 0.5}]))
    for raw in (None, page_raw(load_config("configs/fenmarrow-hopper.toml")), markov, effort):
        for c in controls(raw):
            if c.key.startswith("environment.year."):
                name = c.key.split(".")[-1]
                model = YearSection
            elif c.key.startswith("environment.transitions."):
                name, model = "transitions", EnvironmentSection
            elif c.key == "environment.years":  # the year types' names
                name, model = "name", YearSection
            elif c.key == "environment.switching":
                name, model = "switching", EnvironmentSection
            else:
                section, name = c.key.split(".")
                model = {"density": DensitySection, "experiment": ExperimentSection,
                         "invasion": InvasionSection, "tradeoff": TradeOffSection}.get(section, AlleleSection)
            assert name in model.model_fields, c.key
    assert {c.key for c in controls(markov)} - {c.key for c in controls()} == {
        f"environment.{k}" for k in ("switching", "transitions.wet", "transitions.dry", "year.wet.juvenile_survival",
                                     "year.wet.fecundity", "year.wet.adult_survival", "year.dry.juvenile_survival",
                                     "year.dry.fecundity", "year.dry.adult_survival")}


def test_care_controls_set_the_allele_keys_and_the_theory_reads_them():
    # configs/duskmote-care.toml: B_s = 6 for the one-brood mutant, orphaned young survive 0.3;
    # the controls give the config a TOML file with the same keys gives (same theory), and a
    # brood effect without its scale is refused beside the scale, as the schema words it
    s = LabSession(load_config("configs/duskmote-care.toml"))
    settings = s.view()["settings"]
    assert (settings["mutant.orphan_survival"], settings["resident.brood_effect"]) == (0.3, "exponential")
    assert s.update({"mutant.orphan_survival": "0.6"}) == []
    raw = tomllib.loads(open("configs/duskmote-care.toml").read())
    raw.pop("sweep")
    raw["allele"][1]["orphan_survival"] = 0.6
    assert s.config == parse_config(raw)
    assert s.theory.prediction["invasion_fitness"] == predict(parse_config(raw)).invasion_fitness
    assert s.update({"mutant.brood_effect": ""}) == [
        "allele[1].brood_scale: only used by brood_effect 'exponential', not 'none'"]
    assert control_of(s.problems[0], s.raw) == "mutant.brood_scale"
    assert s.update({"mutant.brood_scale": ""}) == [] and s.config.allele[1].brood_effect == "none"
    assert s.view()["settings"]["mutant.brood_effect"] is None  # shown as the default, "none"


def test_year_type_controls_set_the_environment_and_the_theory_reads_them():
    # configs/fenmarrow-hopper.toml: juvenile survival x 16/9 in wet years, x 2/9 in dry ones
    s = LabSession(load_config("configs/fenmarrow-hopper.toml"))
    key = "environment.year.wet.juvenile_survival"
    assert s.view()["settings"][key] == pytest.approx(16 / 9)
    assert s.update({key: "-1"}) == ["environment.year[0].juvenile_survival must be >= 0; got -1"]
    assert control_of(s.problems[0], s.raw) == key
    assert s.update({key: "1.5"}) == []
    raw = tomllib.loads(open("configs/fenmarrow-hopper.toml").read())
    raw.pop("sweep")
    raw["environment"]["year"][0]["juvenile_survival"] = 1.5
    assert s.config == parse_config(raw)
    assert s.theory.threshold == threshold_at(parse_config(raw), "allele.one-shot.fecundity").value
    # probabilities are set one at a time: the sum is refused until both are changed
    problems = s.update({"environment.year.wet.probability": "0.7"})
    assert problems == ["environment.year.probability: the probabilities must sum to 1; got 1.2"]
    assert s.update({"environment.year.dry.probability": "0.3"}) == []
    assert s.config.environment.year[0].probability == 0.7


def test_year_types_are_added_renamed_switched_and_removed_by_their_names():
    # from the demo's constant environment: naming year types adds an [environment] with equal
    # probabilities, valid at once; a new name renames and keeps the multipliers; another name adds
    # a type (the law again equal); markov switching repeats the law in every row (an iid chain);
    # emptying the names removes the [environment], and the theory is the constant one again
    s = LabSession(load_config("configs/demo.toml"))
    constant = s.theory.prediction["invasion_fitness"]
    assert s.view()["settings"]["environment.years"] is None
    assert s.update({"environment.years": "wet, dry"}) == []
    assert [(y.name, y.probability) for y in s.config.environment.year] == [("wet", 0.5), ("dry", 0.5)]
    assert s.theory.prediction["invasion_fitness"] == pytest.approx(constant, rel=1e-9)  # alike years
    assert s.update({"environment.year.wet.juvenile_survival": "1.8",
                     "environment.year.dry.juvenile_survival": "0.2"}) == []
    assert s.theory.environment and s.theory.prediction["invasion_fitness"] < constant  # the same mean
    assert s.update({"environment.years": "moist, dry"}) == []
    assert s.config.environment.year[0].name == "moist" and s.config.environment.year[0].juvenile_survival == 1.8
    assert s.update({"environment.years": "moist, dry, hot"}) == []
    assert [y.probability for y in s.config.environment.year] == pytest.approx([1 / 3] * 3)
    assert s.config.environment.year[2].juvenile_survival == 1.0
    assert s.update({"environment.switching": "markov"}) == []
    np.testing.assert_allclose(s.config.environment.transitions, np.full((3, 3), 1 / 3))
    assert "environment.transitions.hot" in s.view()["settings"]
    assert s.update({"environment.years": "moist, moist"})[0].startswith("environment.year[1].name: 'moist'")
    assert control_of(s.problems[0], s.raw) == "environment.years"  # shown beside the names
    assert s.update({"environment.years": ""}) == []
    assert s.config.environment is None and s.theory.prediction["invasion_fitness"] == constant
    assert not any(k.startswith("environment.year.") for k in s.view()["settings"])


def test_a_markov_row_is_typed_as_comma_separated_numbers():
    raw = page_raw(load_config("configs/fenmarrow-hopper.toml"))
    raw["environment"].update(switching="markov", transitions=[[0.7, 0.3], [0.4, 0.6]])
    for year in raw["environment"]["year"]:
        year.pop("probability")
    s = LabSession(parse_config(raw))
    assert s.view()["settings"]["environment.transitions.dry"] == [0.4, 0.6]
    assert s.update({"environment.transitions.dry": "0.5, 0.6"}) == [
        "environment.transitions[1]: row must sum to 1; got 1.1"]
    assert control_of(s.problems[0], s.raw) == "environment.transitions.dry"
    assert s.update({"environment.transitions.dry": "0.5, 0.5"}) == []
    assert s.config.environment.transitions == [[0.7, 0.3], [0.5, 0.5]]


def test_lab_command_refuses_bad_input(tmp_path, capsys):
    assert main(["lab", str(tmp_path / "missing.toml"), "--no-browser"]) == 2
    assert "not found" in capsys.readouterr().err
    raw = copy.deepcopy(BASE)
    del raw["invasion"]
    raw["allele"][0]["initial_count"] = 5
    path = tmp_path / "plain.toml"
    path.write_text(_plain_toml(raw))
    assert main(["lab", str(path), "--no-browser"]) == 2
    assert "needs an [invasion] table" in capsys.readouterr().err
    with pytest.raises(SystemExit):
        main(["lab", "--port", "70000"])
    import socket

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        assert main(["lab", "--port", str(port), "--no-browser", "-o", str(tmp_path)]) == 2
    assert f"--port {port}: cannot listen on 127.0.0.1" in capsys.readouterr().err


def test_lab_command_serves_on_loopback_and_prints_the_address(tmp_path):
    import json
    import re
    import subprocess
    import sys
    import urllib.request

    from runs_support import ROOT, env

    proc = subprocess.Popen([sys.executable, "-m", "sim", "lab", "configs/demo.toml", "--no-browser", "--port", "0",
                             "-o", str(tmp_path)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            cwd=ROOT, env=env())
    try:
        line = proc.stdout.readline()
        url = re.search(r"http://127\.0\.0\.1:\d+/", line).group(0)
        assert "<title>broodline lab</title>" in urllib.request.urlopen(url, timeout=30).read().decode()
        view = json.loads(urllib.request.urlopen(url + "api/view", timeout=30).read())
        assert view["mutant"] == "one-shot" and view["settings"]["density.capacity"] == 100.0
    finally:
        proc.terminate()
        proc.wait(timeout=30)


def test_the_finite_n_hook_reaches_the_page(session, monkeypatch):
    import sys
    import types

    from analysis.lab.theory import FiniteN, page_theory

    assert session.theory.finite_n is None or isinstance(session.theory.finite_n, FiniteN)
    fake = types.ModuleType("analysis.fixation")
    fake.finite_population_prediction = lambda config: types.SimpleNamespace(
        fixation_probability=config.density.capacity / 1000, valid=True, fixation_probability_note="a note")
    monkeypatch.setitem(sys.modules, "analysis.fixation", fake)
    assert page_theory(session.config).finite_n == FiniteN(0.05, True, "a note")  # K = 50 in the base config

    def refuse(config):
        raise ValueError("no regulated census")

    fake.finite_population_prediction = refuse
    assert page_theory(session.config).finite_n.note == "no regulated census"


def _post(server, path, body):
    import json
    import urllib.error
    import urllib.request

    request = urllib.request.Request(server.url + path.lstrip("/"), data=json.dumps(body).encode(),
                                     headers={"Content-Type": "application/json"})
    try:
        with urllib.request.urlopen(request, timeout=30) as answer:
            return answer.status, json.loads(answer.read())
    except urllib.error.HTTPError as err:
        return err.code, json.loads(err.read())


def test_a_refused_capacity_is_shown_beside_k_and_changes_nothing(session, tmp_path):
    from analysis.lab import LabServer

    session.run_many(3)
    session.wait()
    before = (session.config, session.theory, session.generation, session.tally())
    server = LabServer(session, output=tmp_path).start()
    try:
        status, view = _post(server, "/api/update", {"changes": {"density.capacity": "1e12"}})
    finally:
        server.close()
    assert status == 200 and view["settings"]["density.capacity"] == 1e12  # shown as typed
    assert [p["control"] for p in view["problems"]] == ["density.capacity"]
    assert "more than" in view["problems"][0]["message"] and "can be counted" in view["problems"][0]["message"]
    assert (session.config, session.theory, session.generation, session.tally()) == before
    assert not session.step_season() and not session.run_many(3)
    with pytest.raises(ConfigError, match="density.capacity"):
        session.save(tmp_path / "k.toml", tmp_path / "k.h5")
    assert list(tmp_path.iterdir()) == []
    assert session.update({"density.capacity": "50"}) == [] and session.tally().n == 3  # back: same replicates


def test_save_refuses_a_config_broodline_check_refuses(session, tmp_path, monkeypatch):
    import analysis.lab.session as lab_session

    monkeypatch.setattr(lab_session, "preflight", lambda config: (_ for _ in ()).throw(
        ConfigError("experiment.replicates: past the budget")))
    with pytest.raises(ConfigError, match="past the budget"):
        session.save(tmp_path / "c.toml", tmp_path / "c.h5")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("key", ["mutant.fecundity", "mutant.juvenile_survival"])
def test_a_sterile_mutant_has_a_theory_and_discards_the_old_replicates(session, key, tmp_path):
    session.run_many(3)
    session.wait()
    assert session.update({key: "0"}) == []
    fn = session.theory.finite_n
    assert fn is not None and not fn.valid and "demographic variance is 0" in fn.note
    assert session.tally().n == 0 and session.generation == 1
    session.run_many(2)
    session.wait()
    saved = session.save(tmp_path / "s.toml", tmp_path / "s.h5")
    assert main(["check", str(saved.config)]) == 0
    from sim.store import read_replicates

    assert len(read_replicates(saved.results)) == 2


def test_a_settings_change_that_fails_half_way_changes_nothing(session, monkeypatch, tmp_path):
    import analysis.lab.session as lab_session
    from analysis.lab import LabServer

    session.run_many(3)
    session.wait()
    before = (copy.deepcopy(session.raw), session.config, session.theory, session.generation, session.tally())

    def fail(config):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr(lab_session, "page_theory", fail)
    server = LabServer(session, output=tmp_path).start()
    try:
        status, answer = _post(server, "/api/update", {"changes": {"mutant.fecundity": "5"}})
    finally:
        server.close()
    assert status == 500 and "ZeroDivisionError" in answer["message"]  # answered, not a dropped connection
    assert (session.raw, session.config, session.theory, session.generation, session.tally()) == before


def test_an_emptied_field_shows_the_default_now_in_force(session):
    # an empty box means "not set", so the schema's default applies; the page shows that value
    default = InvasionSection.model_fields["mutant_count"].default
    assert session.update({"invasion.mutant_count": str(default + 2)}) == []
    assert session.update({"invasion.mutant_count": ""}) == []
    assert session.config.invasion.mutant_count == default
    assert session.view()["settings"]["invasion.mutant_count"] == default
    # a key with no default, emptied, is refused by the schema and shown empty with the problem
    problems = session.update({"mutant.fecundity": ""})
    assert problems and session.view()["settings"]["mutant.fecundity"] is None
    assert control_of(problems[0], session.raw) == "mutant.fecundity"


def test_changing_only_the_replicates_count_keeps_the_replicates(session):
    session.run_many(3)
    session.wait()
    assert session.update({"experiment.replicates": "7"}) == []
    assert session.tally().n == 3 and session.generation == 0 and session.config.experiment.replicates == 7


def test_many_replicates_keep_a_bounded_number_of_lines(session):
    from analysis.lab.session import LINES_KEPT

    n = LINES_KEPT + 3 * BATCH
    session.run_many(n)
    session.wait()
    assert session.tally().n == n and len(session.lines) == LINES_KEPT
    view = session.view()
    assert [line["replicate"] for line in view["lines"]] == list(range(n - LINES_KEPT, n))
    assert [line["replicate"] for line in session.view(n - 5, view["generation"])["lines"]] == list(range(n - 5, n))
    assert sum(1 for _ in session.stored_results()) == n  # every replicate is kept for Save, on disk


def test_the_replicate_count_is_capped(session):
    from analysis.lab.session import MAX_REPLICATES

    problems = session.update({"experiment.replicates": str(10**9)})
    assert [control_of(p, session.raw) for p in problems] == ["experiment.replicates"]
    assert f"at most {MAX_REPLICATES} replicates; got 1000000000" in problems[0]
    assert session.update({"experiment.replicates": "12"}) == []
    for n in (0, MAX_REPLICATES + 1, 2.5, "10"):
        with pytest.raises(ValueError, match="n: a whole number of replicates"):
            session.run_many(n)


def test_the_page_holds_at_most_max_replicates_in_all(session, monkeypatch):
    import analysis.lab.session as lab_session

    monkeypatch.setattr(lab_session, "MAX_REPLICATES", 25)
    assert session.run_many(20)
    session.wait()
    assert session.run_many(20)  # runs the 5 that fit, and says so
    assert "of 20 asked" in session.activity or session.n_replicates == 25
    session.wait()
    assert session.n_replicates == 25 and session.tally().n == 25
    assert not session.run_many(1) and not session.run_one() and not session.step_season()
    assert "holds at most 25 replicates" in session.view()["error"] and session.n_replicates == 25
    session.reset()
    assert session.run_many(3)
    session.wait()
    assert session.n_replicates == 3 and session.view()["error"] == ""


def test_stop_takes_effect_within_one_batch(session):
    session.update({"density.capacity": "400"})
    session.run_many(100 * BATCH)
    while session.tally().n == 0:
        session.wait(0.01)
    with session._lock:  # the count when stop is asked for, with no batch added meanwhile
        asked = session.tally().n
        session._stop.set()
    session.stop()
    assert not session.running and session.tally().n - asked <= BATCH


def test_with_year_types_the_page_shows_the_stochastic_theory():
    # configs/fenmarrow-hopper.toml: the constant-environment closed form says B_s = 4 and so
    # "invades" at B_s = 4.7 (Mylius & Diekmann 1995), but with juvenile survival 0.8 or 0.1 in
    # equally likely years the mutant invades only above B_s = 5.34 (the stochastic theory;
    # Lewontin & Cohen 1969 for the density-free case; tests/test_year_draws.py). The page
    # states what `broodline threshold` does for the same config, and no closed form.
    from analysis.lab.theory import page_theory
    from analysis.sweep import predict_point, threshold_at

    config = LabSession(load_config("configs/fenmarrow-hopper.toml")).config
    theory = page_theory(config)
    assert theory.prediction["verdict"] == "does not invade" and theory.prediction["invasion_fitness"] < 1
    assert theory.prediction["invasion_fitness"] == predict_point(config)["invasion_fitness"]
    assert theory.threshold == pytest.approx(5.34, abs=0.02)
    assert theory.threshold == threshold_at(config, "allele.one-shot.fecundity").value
    assert theory.closed_form is None and "2 year types" in theory.environment
    assert not theory.finite_n.valid and "random years" in theory.finite_n.note


def test_views_are_numbered_in_the_order_taken(session):
    # the page drops an answer older than the one it shows (requests run on concurrent threads)
    first = session.view()
    session.update({"experiment.replicates": 30})
    later = session.view()
    assert later["view"] > first["view"] and later["session"] == first["session"]
    assert later["settings"]["experiment.replicates"] == 30


def test_an_allele_turns_to_effort_and_back_valid_at_once_on_a_straight_curve_through_it(session):
    # The resident (m = 2, s = 0.5) turned to effort gets a straight trade-off through its own
    # numbers at effort 0.5 (max fecundity 4, max survival 1): B(0.5) = 2, P(0.5) = 0.5 (Schaffer
    # 1974's linear curve), so the theory is unchanged; the page shows its effort, not the
    # fecundity and survival the curve gives, and the curve's four keys
    before = session.theory.prediction["invasion_fitness"]
    assert session.update({"resident.breeding": "effort"}) == []
    keys = {c.key for c in controls(session.raw)}
    assert "resident.effort" in keys and not {"resident.fecundity", "resident.adult_survival"} & keys
    assert {"tradeoff.max_fecundity", "tradeoff.survival_shape", "mutant.fecundity"} <= keys
    assert session.config.tradeoff.max_fecundity == 4.0 and session.config.tradeoff.max_adult_survival == 1.0
    assert session.theory.prediction["invasion_fitness"] == pytest.approx(before, rel=1e-12)
    # the mutant too: the threshold is then along its effort. On this curve every effort has the
    # same B(E) / (1 - P(E)) = 4 (neutral under Beverton-Holt on recruitment: Mylius & Diekmann
    # 1995); with diminishing returns (B = 4 sqrt(E)) the ratio falls with E, so mutants below the
    # resident's effort invade: fitness is 1 at the resident's own 0.5 (a mutant like the
    # resident: Metz, Nisbet & Geritz 1992) and at E = 0, an immortal non-breeder (P(0) = 1,
    # lambda = 1), the lowest crossing, which the page shows with the words for two crossings
    assert session.update({"mutant.breeding": "effort", "mutant.effort": "0.7"}) == []
    assert session.theory.parameter == "allele.one-shot.effort"
    assert session.theory.prediction["invasion_fitness"] == pytest.approx(1.0, abs=1e-9)
    assert session.update({"tradeoff.fecundity_shape": "0.5"}) == []
    assert session.theory.threshold == threshold(session.config, "allele.one-shot.effort").value == 0.0
    assert "up to the next crossing: invasion fitness passes 1 at 2 values" in session.theory.threshold_message
    inner = threshold(session.config, "allele.one-shot.effort", bracket=(0.05, 0.95))
    assert inner.value == pytest.approx(0.5, abs=1e-8) and not inner.invades_above
    # back: the curve's numbers at its effort; the curve goes with the last effort allele
    assert session.update({"resident.effort": "0.25", "resident.breeding": "iteroparous"}) == []
    assert (session.config.allele[0].fecundity, session.config.allele[0].adult_survival) == (2.0, 0.75)
    assert session.config.tradeoff is not None
    assert session.update({"mutant.breeding": "semelparous"}) == []
    assert session.config.tradeoff is None
    assert session.config.allele[1].fecundity == pytest.approx(4 * 0.7 ** 0.5, rel=1e-9)
    assert session.config.allele[1].adult_survival is None  # maturity 1: no survival used
    assert "tradeoff.max_fecundity" not in {c.key for c in controls(session.raw)}


def test_a_refused_effort_or_curve_value_is_shown_beside_its_control(session):
    assert session.update({"mutant.breeding": "effort"}) == []
    problems = session.update({"mutant.effort": "1.4"})
    assert problems == ["allele[1].effort must be in [0, 1]; got 1.4"]
    assert control_of(problems[0], session.raw) == "mutant.effort"
    problems = session.update({"mutant.effort": "0.5", "tradeoff.max_adult_survival": "1.2"})
    assert len(problems) == 1 and control_of(problems[0], session.raw) == "tradeoff.max_adult_survival"

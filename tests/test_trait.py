"""Effort alleles, the [trait] grid and trait-substitution runs against adaptive-dynamics theory.

The end-to-end checks run the counts engine from both ends of an effort grid
and ask every replicate to end within one grid step of the attractor that
theory predicts (``analysis.trait.compare_trait``), for a concave and a
linear trade-off under two placements of density dependence.
"""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest

from analysis.trait import compare_trait, effort_model, trait_analysis
from sim.cli import main
from sim.config import ConfigError, parse_config
from sim.config.sweep import sweep_points
from sim.experiment import run_experiment
from sim.store import read_attrs, read_trait, read_trajectories

P, C = 0.9, 0.5  # max_adult_survival, juvenile_survival of every case below


def trait_raw(*, shape=0.5, placement="recruitment", initial=1.0, max_fecundity=3.0, capacity=1000,
              rate=0.02, steps=1500, replicates=2, seed=11, record_every=10, form="beverton-holt") -> dict:
    return {
        "experiment": {"name": "trait", "seed": seed, "replicates": replicates, "max_steps": steps,
                       "stop": "max-steps", "engine": "counts", "trajectory": "by-allele",
                       "record_every": record_every},
        "density": {"form": form, "acts_on": placement, "capacity": capacity},
        "tradeoff": {"max_fecundity": max_fecundity, "fecundity_shape": shape, "max_adult_survival": P},
        "allele": [{"name": "tmpl", "breeding": "effort", "effort": initial, "juvenile_survival": C,
                    "initial_count": capacity}],
        "trait": {"allele": "tmpl", "start": 0.1, "stop": 1.0, "step": 0.1, "initial": initial},
        "mutation": {"rate": rate},
    }


# -- the schema -------------------------------------------------------------------------
def test_trait_grid_makes_one_allele_per_value_started_monomorphic():
    config = parse_config(trait_raw(initial=0.3))
    assert config.allele_names == [f"e{v / 10:.2f}" for v in range(1, 11)]
    assert [a.initial_count for a in config.alleles] == [0, 0, 1000] + [0] * 7
    np.testing.assert_allclose(config.efforts(), np.arange(1, 11) / 10)
    s = config.schedules()[2]  # B(0.3) = 3 sqrt(0.3), P(0.3) = 0.9 x 0.7
    np.testing.assert_allclose([s.fecundity[0], s.survival[0], s.juvenile_survival], [3 * 0.3**0.5, 0.63, C])


def test_names_carry_as_many_decimals_as_the_grid_needs():
    raw = trait_raw(initial=0.25)
    raw["trait"] = {"allele": "tmpl", "values": [0.2, 0.25, 0.3], "initial": 0.25}
    assert parse_config(raw).allele_names == ["e0.20", "e0.25", "e0.30"]
    raw["trait"] = {"allele": "tmpl", "values": [0.2, 0.205, 0.3], "initial": 0.2}
    assert parse_config(raw).allele_names == ["e0.200", "e0.205", "e0.300"]


def test_mutation_moves_to_neighbouring_grid_values():
    q = parse_config(trait_raw(rate=0.02)).mutation_model().matrix
    assert q.shape == (10, 10)
    np.testing.assert_allclose(q.sum(axis=1), 1.0)
    np.testing.assert_allclose(q[4, [3, 4, 5]], [0.01, 0.98, 0.01])  # rate / 2 to each neighbour
    np.testing.assert_allclose(q[0, [0, 1]], [0.98, 0.02])  # an end: the whole rate to its one neighbour
    np.testing.assert_allclose(q[9, [8, 9]], [0.02, 0.98])
    assert np.count_nonzero(q) == 10 + 2 * 9


def _with(path, value):
    raw = trait_raw()
    node = raw
    for key in path[:-1]:
        node = node[key]
    if value is KeyError:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return raw


@pytest.mark.parametrize("path, value, match", [
    (("tradeoff",), KeyError, r"tradeoff: required: allele 'tmpl' has breeding = 'effort'"),
    (("tradeoff", "max_adult_survival"), 1.2, r"tradeoff\.max_adult_survival must be in \[0, 1\]; got 1\.2"),
    (("allele", 0, "effort"), KeyError, r"allele\[0\]\.effort: required for breeding = 'effort'"),
    (("allele", 0, "effort"), 1.5, r"allele\[0\]\.effort must be in \[0, 1\]; got 1\.5"),
    (("allele", 0, "fecundity"), 2.0, r"allele\[0\]\.fecundity: an effort allele takes it from the \[tradeoff\]"),
    (("trait", "initial"), 0.35, r"trait\.initial: must be one of the grid values"),
    (("trait", "step"), 0.4, r"trait\.step: must divide stop - start"),
    (("trait", "values"), [0.1, 0.2], r"trait\.start: give either values or start / stop / step"),
    (("trait", "allele"), "ghost", r"trait\.allele: no allele is named 'ghost'"),
    (("experiment", "stop"), "fixation", r"experiment\.stop: a \[trait\] run .* set stop = 'max-steps'"),
    (("invasion",), {"resident": "tmpl", "mutant": "tmpl"}, r"invasion: a \[trait\] run starts monomorphic"),
    (("sweep",), {"trait.step": [0.1]}, r"sweep\.'trait\.step': is set once per experiment"),
])
def test_bad_effort_and_trait_keys_are_refused_with_their_path(path, value, match):
    with pytest.raises(ConfigError, match=match):
        parse_config(_with(path, value))


def test_a_grid_past_the_cap_is_refused_naming_step_and_its_size(tmp_path, capsys):
    # the issue: step = 1e-7 made `broodline check` build 9.5 million alleles for minutes
    from sim.config.schema import MAX_TRAIT_VALUES

    raw = trait_raw()
    raw["trait"].update(start=0.05, stop=1.0, step=1e-7, initial=1.0)
    with pytest.raises(ConfigError) as err:
        parse_config(raw)
    assert err.value.problems == [
        f"trait.step: a grid from 0.05 to 1 in steps of 1e-07 would make 9,500,001 values; at most "
        f"{MAX_TRAIT_VALUES:,} (each is an allele of the run): use a larger step"]
    raw["trait"].update(start=0.0, stop=1.0, step=0.001)  # the finest grid allowed: 1,001 values
    assert len(parse_config(raw).alleles) == MAX_TRAIT_VALUES == 1_001
    raw["trait"] = {"allele": "tmpl", "values": [i / 2000 for i in range(2001)], "initial": 1.0}
    with pytest.raises(ConfigError, match=r"^trait\.values: 2,001 efforts; at most 1,001"):
        parse_config(raw)
    path = tmp_path / "fine.toml"
    path.write_text(open("configs/tallowcap-effort.toml").read().replace("step = 0.05", "step = 0.0000001"))
    assert main(["check", str(path)]) == 2
    assert "trait.step: a grid from" in capsys.readouterr().err


def test_tradeoff_without_effort_alleles_is_refused():
    raw = {"tradeoff": {"max_fecundity": 2.0, "max_adult_survival": 0.5},
           "allele": [{"name": "a", "breeding": "semelparous", "fecundity": 2.0, "juvenile_survival": 0.5,
                       "initial_count": 3}]}
    with pytest.raises(ConfigError, match=r"tradeoff: no allele has breeding = 'effort'"):
        parse_config(raw)
    del raw["tradeoff"]
    dumped = parse_config(raw).model_dump(mode="json")  # unset additions stay out of older configs' dumps
    assert "tradeoff" not in dumped and "trait" not in dumped and "effort" not in dumped["allele"][0]


def test_tradeoff_and_template_keys_are_sweepable():
    raw = trait_raw()
    raw["sweep"] = {"tradeoff.max_fecundity": [3.0, 4.0], "allele.tmpl.juvenile_survival": [0.4]}
    points = sweep_points(parse_config(raw))
    assert [p.config.tradeoff.max_fecundity for p in points] == [3.0, 4.0]
    assert all(s.juvenile_survival == 0.4 for s in points[1].config.schedules())


# -- the theory from a config -----------------------------------------------------------
def test_effort_model_refuses_effort_alleles_on_different_life_cycles():
    alleles = [{"name": n, "breeding": "effort", "effort": e, "juvenile_survival": c, "initial_count": 5}
               for n, e, c in (("low", 0.2, 0.5), ("high", 0.8, 0.4))]
    config = parse_config({"tradeoff": {"max_fecundity": 3.0, "max_adult_survival": 0.9}, "allele": alleles})
    with pytest.raises(ConfigError, match=r"allele 'high': juvenile_survival = 0\.4 differs from allele 'low' "
                                          r"\(juvenile_survival = 0\.5\)"):
        effort_model(config)


def test_effort_model_refuses_unequal_care():
    # analysis.adaptive puts every effort on one life cycle: parental effects must be the same for all
    alleles = [{"name": n, "breeding": "effort", "effort": e, "juvenile_survival": 0.5, "initial_count": 5}
               for n, e in (("low", 0.2), ("high", 0.8))]
    alleles[1]["orphan_survival"] = 0.1
    config = parse_config({"tradeoff": {"max_fecundity": 3.0, "max_adult_survival": 0.9}, "allele": alleles})
    with pytest.raises(ConfigError, match=r"allele 'high': orphan_survival = 0\.1 differs from allele 'low' "
                                          r"\(not set\)"):
        effort_model(config)


# Random years on a linear trade-off (B = 4 E, P = 0.98 (1 - E), c = 0.5; iid years, juvenile
# survival x 1 or x 0.225 with probability 1/2): the mean year would take effort to breeding once,
# random years hold it at the geometric-mean optimum E* = 0.444 (tests/test_adaptive.py derives it;
# the theory's own year draws give it with their sampling error, sd about 0.0099).
def years_trait_raw(*, initial=0.3, **kwargs) -> dict:
    raw = trait_raw(shape=1.0, max_fecundity=4.0, form="ceiling", placement="all-survival", initial=initial,
                    **kwargs)
    raw["tradeoff"]["max_adult_survival"] = 0.98
    raw["environment"] = {"switching": "iid", "year": [
        {"name": "kind", "probability": 0.5}, {"name": "harsh", "probability": 0.5, "juvenile_survival": 0.225}]}
    return raw


def test_effort_model_reads_year_types_and_the_theorys_draws():
    from analysis.varying_years import year_draws

    config = parse_config(years_trait_raw())
    model = effort_model(config)
    assert model.years == config.year_types()
    np.testing.assert_array_equal(model.year_draws.indices, year_draws(config).indices)
    assert trait_analysis(config).attractors == pytest.approx([0.444], abs=4 * 0.0099)


def test_a_trait_run_in_random_years_plots_reports_and_compares(tmp_path, capsys):
    out = tmp_path / "years.h5"
    run_experiment(parse_config(years_trait_raw(steps=100, capacity=10000)), out, progress=False)
    assert main(["plot", str(out), "-o", str(tmp_path / "fig")]) == 0
    assert (tmp_path / "fig" / "trait.png").is_file()
    assert main(["report", str(out), "-o", str(tmp_path / "r.html")]) == 0
    page = (tmp_path / "r.html").read_text()
    assert "Predicted attractor: " in page and "In random years" in page
    capsys.readouterr()
    assert main(["compare", str(out), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert all(r["attractors"] == pytest.approx([0.444], abs=4 * 0.0099) for r in out["replicates"])
    (point,) = out["points"]  # the replicates together, against the attractor and its standard error
    assert point["attractor"] == out["replicates"][0]["attractors"][0] and point["attractor_se"] > 0
    assert point["persisting"] == sum(r["verdict"] != "extinct" for r in out["replicates"])


@pytest.mark.slow
def test_trait_substitution_in_random_years_settles_at_the_bet_hedging_optimum(tmp_path):
    """Runs from E = 0.3 and 0.6 (8 replicates each, K = 1e5, 3000 seasons) end, on average, at the
    attractor of the stochastic theory, not at the mean year's E = 1.

    A replicate's mean effort wanders with the years (fluctuating selection): in pilot runs (seeds
    11 and 12) the end means spread with sd about 0.06 around E*, and 2 of 16 lay more than one
    grid step away, so the check is on their average: within 4 standard errors (the replicates'
    own sd / sqrt(n), combined with the theory's own, from its finite year draws) plus half a grid
    step, since a population on a grid of efforts can settle with its mean up to about half a step
    from an attractor between two grid values (0.24 of a step in the constant-environment care
    example). The grid here is 0.05 (20 efforts). A long run of harsh years can end a population
    even at K = 1e5 (1 of 16 in the pilots): such replicates are left out, as the invasion theory
    says nothing of them, and at least 12 must remain.
    """
    ends, attractors = [], set()
    for initial in (0.3, 0.6):
        out = tmp_path / f"years-{initial}.h5"
        raw = years_trait_raw(initial=initial, capacity=100000, steps=3000, replicates=8, seed=11, rate=0.01)
        raw["trait"] |= {"start": 0.05, "step": 0.05}
        run_experiment(parse_config(raw), out, progress=False)
        table = compare_trait(out)
        alive = table[table["verdict"] != "extinct"]
        ends += alive["end_mean_effort"].tolist()
        attractors |= {tuple(a) for a in alive["attractors"]}
    assert len(ends) >= 12
    (attractor,) = attractors
    (star,) = attractor
    ends = np.array(ends)
    se = np.hypot(ends.std(ddof=1) / np.sqrt(ends.size), float(alive["attractor_se"].iloc[0]))
    print(f"{ends.size} persisting: mean end effort {ends.mean():.4f} (se {se:.4f}), attractor {star:.4f}")
    assert abs(ends.mean() - star) < 4 * se + 0.05 / 2, (ends, star)
    assert ends.mean() < 0.8  # far from the constant mean year's E = 1


# Parental care on a linear trade-off (B = 6 E, P = 0.9 (1 - E), c_care = 0.5, c_orphan = 0.1): a
# young's survival is P c_care + (1 - P) c_orphan on average (DESIGN.md's care rule), so care bends
# what selection maximises and stops effort short of breeding once (without care a linear
# trade-off goes to an end: Schaffer 1974). Attractors derived in tests/test_adaptive.py: a
# ceiling on everyone maximises lambda, E* = 1/2 + (a c_o - p) / (2 a p (c - c_o)); Beverton-Holt
# on recruitment maximises B g / (1 - P) (Mylius & Diekmann 1995), E* the root of
# b p E^2 + 2 b (1 - p) E - a' (1 - p) = 0, b = p (c - c_o), a' = b + c_o.
CARE_ORPHANS = 0.1
_B, _A = P * (C - CARE_ORPHANS), P * (C - CARE_ORPHANS) + CARE_ORPHANS
CARE_ATTRACTORS = {
    ("ceiling", "all-survival"): 0.5 + (6.0 * CARE_ORPHANS - P) / (2 * 6.0 * P * (C - CARE_ORPHANS)),
    ("beverton-holt", "recruitment"): (-(1 - P) + np.sqrt((1 - P) ** 2 + P * _A * (1 - P) / _B)) / P,
}


def cared_trait_raw(form, placement, **kwargs) -> dict:
    raw = trait_raw(shape=1.0, max_fecundity=6.0, form=form, placement=placement, **kwargs)
    raw["allele"][0]["orphan_survival"] = CARE_ORPHANS
    return raw


@pytest.mark.parametrize("form, placement", list(CARE_ATTRACTORS))
def test_attractor_with_parental_care(form, placement):
    config = parse_config(cared_trait_raw(form, placement))
    assert trait_analysis(config).attractors == pytest.approx([CARE_ATTRACTORS[form, placement]], abs=1e-7)


@pytest.mark.parametrize("initial", [0.1, 0.7])
@pytest.mark.parametrize("form, placement", list(CARE_ATTRACTORS))
def test_trait_substitution_with_parental_care_reaches_its_attractor(tmp_path, form, placement, initial):
    """Every replicate ends within one grid step (0.1) of the attractor care predicts (0.43, 0.28).

    From 0.1 (below) and 0.7 (above; at E = 1 every young is an orphan and the population dies
    out: 6 x 0.1 < 1). K = 1000, 1500 seasons: in pilot runs (seed 11, 4 replicates per case) the
    end means lay within 0.035 of the attractor, so 0.1 is about three such spreads away.
    """
    out = tmp_path / "trait.h5"
    raw = cared_trait_raw(form, placement, initial=initial, rate=0.01, replicates=4, seed=11)
    run_experiment(parse_config(raw), out, progress=False)
    table = compare_trait(out)
    assert table["attractors"].tolist() == [pytest.approx([CARE_ATTRACTORS[form, placement]])] * 4
    assert table["verdict"].tolist() == ["at attractor"] * 4, table


@pytest.mark.parametrize("shape, placement, max_fecundity, expected", [
    # concave, regulated recruitment: maximise B / (1 - P) (Mylius & Diekmann 1995):
    # d/dE [sqrt(E) / (1 - p + p E)] = 0 gives E* = (1 - p) / p (derived)
    (0.5, "recruitment", 3.0, (1 - P) / P),
    # concave, all survival regulated alike: maximise c B + P (Schaffer 1974): E* = (c a / 2p)^2 (derived)
    (0.5, "all-survival", 3.0, (C * 3.0 / (2 * P)) ** 2),
    # linear: B / (1 - P) increases with E, so E = 1 under regulated recruitment (derived);
    # c B + P is linear, E = 1 where c a > p (Schaffer 1974)
    (1.0, "recruitment", 6.0, 1.0),
    (1.0, "all-survival", 6.0, 1.0),
])
def test_attractor_of_the_configured_model(shape, placement, max_fecundity, expected):
    config = parse_config(trait_raw(shape=shape, placement=placement, max_fecundity=max_fecundity))
    assert trait_analysis(config).attractors == pytest.approx([expected], abs=1e-7)


# -- runs -------------------------------------------------------------------------------
def test_short_run_from_the_upper_end_reaches_the_regulated_recruitment_attractor(tmp_path):
    """Concave curve, Beverton-Holt on recruitment: from E = 1 down to E* = (1 - p)/p = 0.11.

    Tolerance: one grid step (0.1) around E*, the resolution of the grid itself; in
    pilot runs (seeds 1-4, K = 200 and 1000) the end means lay within 0.03 of E*.
    """
    out = tmp_path / "trait.h5"
    run_experiment(parse_config(trait_raw(initial=1.0)), out, progress=False)
    attrs = read_attrs(out)
    np.testing.assert_allclose(attrs["trait_efforts"], np.arange(1, 11) / 10)
    table = compare_trait(out)
    assert table["attractors"].tolist() == [pytest.approx([(1 - P) / P])] * 2
    assert table["verdict"].tolist() == ["at attractor"] * 2, table
    # read_trait is the counts by allele weighted by the grid values
    counts = read_trajectories(out, by_age=False)
    first = counts[(counts["replicate"] == 0) & (counts["step"] == counts["step"].max())]
    trait = read_trait(out)
    last = trait[(trait["replicate"] == 0)].iloc[-1]
    n = first["count"].sum()
    mean = (first["count"].to_numpy() * np.arange(1, 11) / 10).sum() / n
    assert last["census"] == n and last["mean_effort"] == pytest.approx(mean)
    assert trait[trait["step"] == 0]["mean_effort"].tolist() == [1.0, 1.0]


@pytest.mark.slow
@pytest.mark.parametrize("initial", [0.1, 1.0])
@pytest.mark.parametrize("shape, placement, max_fecundity", [
    (0.5, "recruitment", 3.0), (0.5, "all-survival", 3.0), (1.0, "recruitment", 6.0), (1.0, "all-survival", 6.0)])
def test_trait_substitution_reaches_the_predicted_attractor_from_either_end(
        tmp_path, shape, placement, max_fecundity, initial):
    """Every replicate ends within one grid step (0.1) of the predicted attractor.

    Attractors: see test_attractor_of_the_configured_model (0.111 and 0.694 for the
    concave curve, 1 for the linear one). K = 5000 keeps drift small where selection is
    weak (near E* = 0.69 the landscape is flat): in pilot runs the end means of 8
    replicates per case spread by about 0.02 around E*, so 0.1 is over 4 spreads away.
    """
    out = tmp_path / "trait.h5"
    raw = trait_raw(shape=shape, placement=placement, max_fecundity=max_fecundity, initial=initial,
                    capacity=5000, rate=0.01, steps=3000, replicates=4, seed=5)
    run_experiment(parse_config(raw), out, progress=False)
    table = compare_trait(out)
    assert table["verdict"].tolist() == ["at attractor"] * 4, table


# -- the command line -------------------------------------------------------------------
def test_invasibility_command_writes_the_plot_and_json(tmp_path, capsys):
    config = tmp_path / "trait.toml"
    _write_toml(config, trait_raw(placement="all-survival"))
    assert main(["invasibility", str(config), "-o", str(tmp_path / "inv"), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["efforts"] == pytest.approx(list(np.arange(1, 11) / 10))  # the [trait] grid by default
    assert out["attractors"] == pytest.approx([(C * 3.0 / (2 * P)) ** 2])
    assert (tmp_path / "inv" / "pairwise_invasibility.svg").is_file()
    # an earlier run's files are replaced only when asked, as plot's figures are
    before = (tmp_path / "inv" / "invasibility.json").read_text()
    assert main(["invasibility", str(config), "-o", str(tmp_path / "inv"), "--grid", "21"]) == 2
    assert "pass --overwrite to replace" in capsys.readouterr().err
    assert (tmp_path / "inv" / "invasibility.json").read_text() == before
    assert main(["invasibility", str(config), "-o", str(tmp_path / "inv"), "--grid", "21", "--json",
                 "--overwrite"]) == 0
    assert len(json.loads(capsys.readouterr().out)["efforts"]) == 21


@pytest.mark.parametrize("grid", ["2", "1002"])
def test_invasibility_refuses_a_grid_out_of_bounds_before_computing(tmp_path, capsys, grid):
    config = tmp_path / "trait.toml"
    _write_toml(config, trait_raw(placement="all-survival"))
    assert main(["invasibility", str(config), "-o", str(tmp_path / "inv"), "--grid", grid]) == 2
    assert f"--grid must be from 3 to 1001 (N x N invasion fitnesses); got {grid}" in capsys.readouterr().err
    assert not (tmp_path / "inv").exists()


def test_invasibility_command_refuses_a_bad_config_with_status_2(tmp_path, capsys):
    config = tmp_path / "bad.toml"
    _write_toml(config, _with(("tradeoff", "max_adult_survival"), 1.5))
    assert main(["invasibility", str(config), "-o", str(tmp_path / "inv")]) == 2
    assert "tradeoff.max_adult_survival must be in [0, 1]" in capsys.readouterr().err


def test_plot_and_compare_of_a_trait_run(tmp_path, capsys):
    out = tmp_path / "trait.h5"
    run_experiment(parse_config(trait_raw(steps=200, replicates=2)), out, progress=False)
    assert main(["plot", str(out), "-o", str(tmp_path / "fig")]) == 0
    assert (tmp_path / "fig" / "trait.png").is_file() and (tmp_path / "fig" / "trait.svg").is_file()
    import matplotlib.pyplot as plt

    from analysis.trait_plots import trait_figure

    fig = trait_figure(out)  # one point, nothing swept: no "point 0" title on its one panel
    assert fig.axes[0].get_title() == ""
    plt.close(fig)
    capsys.readouterr()
    assert main(["compare", str(out), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)["replicates"]
    assert [r["replicate"] for r in rows] == [0, 1]
    assert {"end_mean_effort", "nearest_attractor", "grid_step", "verdict"} <= set(rows[0])
    assert main(["compare", str(out)]) == 0
    mean = np.mean([r["end_mean_effort"] for r in rows])
    assert (f"point 0: the end effort of its 2 persisting replicates averages {mean:.4g}"
            in capsys.readouterr().out)


def _write_toml(path, raw: dict) -> None:
    """A tiny TOML writer for these flat tables (no dependency needed)."""
    lines = []

    def value(v):
        return json.dumps(v) if not isinstance(v, bool) else str(v).lower()

    raw = copy.deepcopy(raw)
    for section, body in raw.items():
        if isinstance(body, list):
            for item in body:
                lines.append(f"[[{section}]]")
                lines += [f"{k} = {value(v)}" for k, v in item.items()]
        else:
            lines.append(f"[{section}]")
            lines += [f"{k} = {value(v)}" for k, v in body.items()]
    path.write_text("\n".join(lines) + "\n")


@pytest.mark.parametrize("form, placement, principle", [
    ("beverton-holt", "recruitment", "maximises R0, proportional to B(E) (P(E) c_care + (1 - P(E)) c_orphan) "
                                     "/ (1 - P(E))"),
    ("ceiling", "all-survival", "maximises the growth rate lambda (no density dependence, or density "
                                "dependence on all survival as a ceiling's cull after the season)"),
    ("beverton-holt", "all-survival", None),  # with care no common factor: no principle is claimed
])
def test_the_report_states_what_care_makes_selection_maximise(tmp_path, form, placement, principle):
    out = tmp_path / "care.h5"
    run_experiment(parse_config(cared_trait_raw(form, placement, initial=0.5, steps=50)), out, progress=False)
    assert main(["report", str(out), "-o", str(tmp_path / "r.html")]) == 0
    page = (tmp_path / "r.html").read_text()
    if principle is None:
        assert "Here the winning effort maximises" not in page
    else:
        assert principle in page
    assert "Predicted attractor: " in page  # the theory covers care

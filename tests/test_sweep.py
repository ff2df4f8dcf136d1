"""Sweeps: cartesian lists, linked groups that vary together, any numeric key; `check` shows the work."""

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from sim.cli import main
from sim.config import ConfigError, parse_config, sweep_points, swept_paths
from sim.experiment import run_experiment
from sim.store import read_points, read_replicates, read_trajectories
from tests.runs_support import small_text

ROOT = Path(__file__).resolve().parent.parent


def _config(sweep_toml: str, base: str | None = None):
    text = (base or small_text()).split("[sweep]")[0] + sweep_toml
    return parse_config(tomllib.loads(text))


def test_cartesian_times_linked_group_in_order():
    config = _config("""
[sweep]
"density.capacity" = [10, 20, 30]
"allele.perennial.adult_survival" = [0.4, 0.5]

[[sweep.linked]]
"allele.one-shot.fecundity" = [4.0, 5.0]
"allele.one-shot.juvenile_survival" = [0.6, 0.5]
""")
    points = sweep_points(config)
    assert len(points) == 3 * 2 * 2
    assert swept_paths(config) == ["density.capacity", "allele.perennial.adult_survival",
                                   "allele.one-shot.fecundity", "allele.one-shot.juvenile_survival"]
    # the last factor varies fastest; linked values always come as the listed pairs
    assert [p.values["density.capacity"] for p in points[:4]] == [10, 10, 10, 10]
    pairs = {(p.values["allele.one-shot.fecundity"], p.values["allele.one-shot.juvenile_survival"])
             for p in points}
    assert pairs == {(4.0, 0.6), (5.0, 0.5)}
    p = points[7]  # capacity 20, adult_survival 0.5, second linked pair
    assert p.values == {"density.capacity": 20, "allele.perennial.adult_survival": 0.5,
                        "allele.one-shot.fecundity": 5.0, "allele.one-shot.juvenile_survival": 0.5}
    assert p.config.density.capacity == 20
    perennial, one_shot = p.config.allele
    assert (perennial.adult_survival, one_shot.fecundity, one_shot.juvenile_survival) == (0.5, 5.0, 0.5)


def test_two_linked_groups_multiply():
    config = _config("""
[[sweep.linked]]
"density.capacity" = [10, 20, 30]
"invasion.mutant_count" = [1, 2, 3]

[[sweep.linked]]
"allele.one-shot.fecundity" = [4.0, 5.0]
"mutation.rate" = [0.0, 0.001]
""")
    points = sweep_points(config)
    assert len(points) == 6
    assert all(p.config.invasion.mutant_count * 10 == p.config.density.capacity for p in points)
    assert all((p.config.allele[1].fecundity == 5.0) == (p.config.mutation.rate == 0.001) for p in points)


@pytest.mark.parametrize("sweep, message", [
    ('[[sweep.linked]]\n"allele.one-shot.fecundity" = [4.0, 5.0]\n"density.capacity" = [10]\n',
     r"sweep.linked\[0\]: linked lists must have equal length; got allele.one-shot.fecundity has 2, "
     r"density.capacity has 1"),
    ('[sweep]\n"density.capacity" = [10]\n[[sweep.linked]]\n"density.capacity" = [20]\n',
     r"'density.capacity' is swept twice"),
    ('[[sweep.linked]]\n"allele.one-shot.fecundty" = [4.0]\n',
     r"sweep.linked\[0\].'allele.one-shot.fecundty': allele has no sweepable key 'fecundty'; "
     r"did you mean 'fecundity'\?"),
    ('[[sweep.linked]]\n"density.capacity" = []\n', r"needs a list of at least one value"),
    ('[sweep]\nlinked = [3]\n', r"sweep.linked\[0\]: write each linked group as a \[\[sweep.linked\]\] table"),
    ('[[sweep.linked]]\n"experiment.trajectory" = ["none"]\n', r"set once per experiment"),
    ('[[sweep.linked]]\n"allele.one-shot.juvenile_survival" = [0.5, 1.5]\n"density.capacity" = [1, 2]\n',
     r"sweep point 1 \(.*allele.one-shot.juvenile_survival = 1.5.*\): "
     r"allele\[1\].juvenile_survival must be in \[0, 1\]; got 1.5"),
])
def test_bad_sweeps_are_refused_with_the_path(sweep, message):
    with pytest.raises(ConfigError, match=message):
        _config(sweep)


def test_a_problem_of_every_point_is_said_once():
    # a year type pushes the unswept juvenile survival above 1 at every point: one message for
    # it, not one per point (a point's own problem keeps its point and value: the test above)
    raw = tomllib.loads(open("configs/fenmarrow-hopper.toml").read())
    raw["environment"]["year"][0]["juvenile_survival"] = 2.5
    with pytest.raises(ConfigError) as err:
        sweep_points(parse_config(raw))
    wet = "environment.year.wet: allele '{}', year 'wet': juvenile_survival x multiplier = 1.125 > 1"
    assert [p.split("; a survival")[0] for p in err.value.problems] == [
        "every sweep point: " + wet.format("perennial"), "every sweep point: " + wet.format("one-shot")]


def test_check_prints_points_and_total_work(tmp_path, capsys):
    path = tmp_path / "sweep.toml"
    path.write_text(small_text(replicates=30))
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert ("sweep points: 4 = 2 (density.capacity) x 2 (allele.one-shot.fecundity with "
            "allele.one-shot.juvenile_survival)") in out
    assert "  3: density.capacity = 25, allele.one-shot.fecundity = 6.0, " \
           "allele.one-shot.juvenile_survival = 0.45" in out
    assert "replicates: 30 per point, 120 in all (at most 36,000 seasons; trajectories by-age)" in out


def test_check_names_a_single_swept_key_without_a_product(capsys):
    assert main(["check", str(ROOT / "configs" / "demo.toml")]) == 0
    assert "sweep points: 8 (allele.one-shot.fecundity)\n" in capsys.readouterr().out


def test_sweep_reaches_resident_and_density_in_the_runs(tmp_path):
    # Resident iteroparous (B = 2, c = 0.5, survival P) under Beverton-Holt on recruitment has
    # N* = K (B c / (1 - P) - 1): from N = P N + B c N / (1 + N/K) (Beverton & Holt 1957 form;
    # the equilibrium algebra is common practice). The first stored census must start there.
    config = _config("""
[sweep]
"density.capacity" = [20, 40]
"allele.perennial.adult_survival" = [0.5, 0.6]
""", base=small_text(replicates=2))
    out = tmp_path / "resident.h5"
    run_experiment(config, out, progress=False)
    points = read_points(out)
    first = read_trajectories(out, by_age=False).query("step == 0 and allele == 'perennial'")
    for row in points.itertuples():
        k, p = row[2], row[3]
        expected = k * (2.0 * 0.5 / (1 - p) - 1)
        starts = first[first["point"] == row.point]["count"]
        assert len(starts) == 2 and (starts == round(expected)).all(), (k, p, expected, starts)


def test_linked_sweep_matches_branching_process_extinction(tmp_path):
    # One allele, no density dependence, a single founder: a Galton-Watson process whose
    # offspring number is Poisson(F) thinned by juvenile survival c, i.e. Poisson(lambda = F c).
    # Its extinction probability solves q = exp(lambda (q - 1)) (branching-process extinction;
    # Haldane 1927). Linked pairs with the same lambda must give the same q. A line that
    # reaches max_population (capped) dies out later with chance q**500 ~ 0: count it as escaped.
    text = """
[experiment]
name = "founders"
seed = 99
replicates = 600
max_steps = 200
stop = "max-steps"
max_population = 500

[[allele]]
name = "founder"
breeding = "semelparous"
fecundity = 3.0
juvenile_survival = 0.5
initial_count = 1

[[sweep.linked]]
"allele.founder.fecundity" = [3.0, 2.5, 5.0]
"allele.founder.juvenile_survival" = [0.5, 0.8, 0.3]
"""
    config = parse_config(tomllib.loads(text))
    out = tmp_path / "founders.h5"
    run_experiment(config, out, workers=2, progress=False)
    reps = read_replicates(out)
    assert set(reps["outcome"]) <= {"extinct", "capped"}
    n = 600
    for point, lam in enumerate([1.5, 2.0, 1.5]):
        q = brentq(lambda x, lam=lam: x - math.exp(lam * (x - 1)), 0.0, 1.0 - 1e-9)
        observed = (reps[reps["point"] == point]["outcome"] == "extinct").mean()
        se = math.sqrt(q * (1 - q) / n)
        # 4 standard errors: a false failure about once in 16 000 runs per point
        assert abs(observed - q) < 4 * se, (point, lam, observed, q)
    lost = reps.groupby("point")["outcome"].apply(lambda s: (s == "extinct").mean()).to_numpy()
    assert abs(lost[0] - lost[2]) < 4 * math.sqrt(2) * math.sqrt(0.417 * 0.583 / n)
    # q(1.5) = 0.417 (value from memory) pins the root finder to the intended root, not q = 1
    assert np.isclose(brentq(lambda x: x - math.exp(1.5 * (x - 1)), 0, 1 - 1e-9), 0.417, atol=1e-3)


# A linked group along which the threshold has a closed form. Resident: iteroparous,
# B_i = 2, P = 0.5, c = 0.5; Beverton-Holt on recruitment. At the resident's equilibrium
# R0 = c f B_i / (1 - P) = 1, so recruits survive with f = (1 - P) / (c B_i); a semelparous
# mutant breeding at age 1 has R0 = c_s f B_s and invades iff c_s B_s > c B_i / (1 - P) = 2
# (R0 under recruitment regulation, Mylius & Diekmann 1995). The group moves B_s from 3 to 6
# and c_s from 0.5 to 0.4 linearly, so c_s = 0.5 - (B_s - 3) / 30 and the threshold solves
# B_s (0.6 - B_s / 30) = 2: B_s = 9 - sqrt(21).
LINKED_THRESHOLD = """
[sweep]
"density.capacity" = [15, 25]

[[sweep.linked]]
"allele.one-shot.fecundity" = [3.0, 4.0, 6.0]
"allele.one-shot.juvenile_survival" = [0.5, 0.4666666666666667, 0.4]
"""


def test_threshold_along_a_linked_group_is_reported_along_the_group(tmp_path, capsys):
    import json

    path = tmp_path / "linked.toml"
    path.write_text(small_text().split("[sweep]")[0] + LINKED_THRESHOLD)
    assert main(["threshold", str(path), "--json"]) == 0
    found = [t for t in json.loads(capsys.readouterr().out)["thresholds"]
             if t["parameter"] != "density.capacity"]  # (capacity has no threshold here)
    expected = 9 - math.sqrt(21)
    assert [t["at"] for t in found] == [{"density.capacity": 15}, {"density.capacity": 25}]
    for t in found:
        assert t["parameter"] == "allele.one-shot.fecundity"  # the axis: the group's first member
        assert t["value"] == pytest.approx(expected, abs=1e-8)
        assert t["linked"]["allele.one-shot.juvenile_survival"] == pytest.approx(
            0.5 - (expected - 3) / 30, abs=1e-8)
        assert t["invades_above"] is True
    # the other member as the axis: the same crossing, read along juvenile survival
    assert main(["threshold", str(path), "--json", "--parameter",
                 "allele.one-shot.juvenile_survival"]) == 0
    t = json.loads(capsys.readouterr().out)["thresholds"][0]
    assert t["parameter"] == "allele.one-shot.juvenile_survival"
    assert t["value"] == pytest.approx(0.5 - (expected - 3) / 30, abs=1e-8)
    assert t["linked"]["allele.one-shot.fecundity"] == pytest.approx(expected, abs=1e-6)
    assert main(["threshold", str(path)]) == 0
    assert "along the linked group, axis allele.one-shot.fecundity" in capsys.readouterr().out


def test_other_swept_paths_leave_out_the_whole_linked_group():
    from analysis.sweep import numeric_sweep_paths, other_swept_paths

    config = _config(LINKED_THRESHOLD)
    assert numeric_sweep_paths(config) == ["density.capacity", "allele.one-shot.fecundity"]
    assert other_swept_paths(config, "allele.one-shot.juvenile_survival") == ["density.capacity"]
    assert other_swept_paths(config, "density.capacity") == [
        "allele.one-shot.fecundity", "allele.one-shot.juvenile_survival"]
    assert other_swept_paths(config, None) == swept_paths(config)

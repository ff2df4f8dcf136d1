"""locate: the finite-N threshold by a sequential design (analysis.locate)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from analysis.locate import fit_dose_response, kimura_curve, locate, next_value
from sim.config import parse_config
from sim.status import experiment_status
from sim.store import read_attrs, read_points, read_replicates

PARAMETER = "allele.one-shot.fecundity"


def test_kimura_curve_matches_kimura_and_the_neutral_point():
    # Kimura (1962): u = (1 - e^(-S p)) / (1 - e^(-S)); u = p where S = 0
    p = np.array([0.01, 0.2])
    assert kimura_curve([3.0, 3.0], p, 3.0, 50.0) == pytest.approx(p)
    s = 50.0 * (3.1 - 3.0)
    assert kimura_curve(3.1, 0.2, 3.0, 50.0) == pytest.approx(-math.expm1(-s * 0.2) / -math.expm1(-s))
    # far on either side: finite, no overflow, monotone
    u = kimura_curve(np.linspace(0, 6, 13), 0.01, 3.0, 400.0)
    assert np.all(np.isfinite(u)) and np.all(np.diff(u) >= 0)


def test_profile_interval_covers_the_true_crossing_about_95_percent():
    # Synthetic binomial data from a Kimura curve (theta 3, beta 40, p 0.05) at five values,
    # 400 replicates each; 40 data sets. A 95% interval covers in 38 of 40 on average; the
    # count is Binomial(40, 0.95) (sd 1.4), so at least 34 (2.9 sd below) unless the interval
    # is too narrow (a Wald-like interval at half the width would cover ~ 26). Fixed seed.
    rng = np.random.default_rng(12)
    x = np.array([2.95, 2.98, 3.0, 3.03, 3.06])
    p = np.full(5, 0.05)
    n = np.full(5, 400)
    truth = kimura_curve(x, p, 3.0, 40.0)
    covered, widths = 0, []
    for _ in range(40):
        fixed = rng.binomial(n, truth)
        fit = fit_dose_response(x, p, fixed, n, bracket=(2.7, 3.3), theta0=3.0, beta0=40.0,
                                prior_sd=None, grid=41)
        covered += fit.low <= 3.0 <= fit.high
        widths.append(fit.half_width)
    assert covered >= 34
    assert np.median(widths) < 0.05


def test_next_value_alternates_sides_of_the_estimate_within_the_bracket():
    from analysis.locate import DoseResponseFit

    fit = DoseResponseFit(3.0, 20.0, 2.9, 3.1)
    # S = beta (x - theta) = 3 after the first stage (which was below), then -1.5, and so on
    assert next_value(fit, 0, bracket=(2.7, 3.3)) == pytest.approx(3.0 + 3 / 20)
    assert next_value(fit, 1, bracket=(2.7, 3.3)) == pytest.approx(3.0 - 1.5 / 20)
    assert next_value(fit, 2, bracket=(2.7, 3.3)) == pytest.approx(3.0 + 3 / 20)
    # a mutant that invades below the threshold (beta < 0): the sides swap
    assert next_value(DoseResponseFit(3.0, -20.0, 2.9, 3.1), 0, bracket=(2.7, 3.3)) == pytest.approx(2.85)
    assert next_value(DoseResponseFit(3.0, 1.0, 2.9, 3.1), 0, bracket=(2.7, 3.3)) == 3.3


def test_design_points_carry_the_information_the_notes_give():
    # Fisher information on theta of one replicate at scaled selection S, per unit of p:
    # h(S) = u'(S)^2 / (p u (1 - u)) for Kimura's (1962) curve, u'(S) by central differences
    p, e = 1 / 201, 1e-5

    def h(s):
        u = kimura_curve(s, p, 0.0, 1.0)
        du = (kimura_curve(s + e, p, 0.0, 1.0) - kimura_curve(s - e, p, 0.0, 1.0)) / (2 * e)
        return float(du**2 / (p * u * (1 - u)))

    grid = np.linspace(-4, 8, 1201)
    values = [h(s) for s in grid]
    assert grid[int(np.argmax(values))] == pytest.approx(1.3, abs=0.05)
    assert max(values) == pytest.approx(0.28, abs=0.005)
    for s, want in ((0, 0.25), (-1.5, 0.17), (3, 0.25), (4, 0.22), (-3, 0.08)):
        assert h(s) == pytest.approx(want, abs=0.005)


def _config(replicates=60):
    return parse_config(
        {
            "experiment": {"name": "locate-test", "seed": 4, "replicates": replicates,
                           "max_steps": 100000, "engine": "counts", "trajectory": "by-allele"},
            "density": {"form": "ceiling", "acts_on": "all-survival", "capacity": 20},
            "allele": [
                {"name": "perennial", "breeding": "iteroparous", "fecundity": 2.0,
                 "adult_survival": 0.5, "juvenile_survival": 0.5},
                {"name": "one-shot", "breeding": "semelparous", "fecundity": 3.0, "juvenile_survival": 0.5},
            ],
            "invasion": {"resident": "perennial", "mutant": "one-shot", "mutant_count": 4},
        }
    )


def test_locate_stages_are_sweep_points_and_resume_continues_the_same_design(tmp_path):
    config = _config()
    kw = dict(bracket=(2.5, 3.5), tolerance=1e-6, workers=1)  # the budget stops it
    whole = locate(config, PARAMETER, tmp_path / "whole.h5", budget=240, **kw)
    assert whole.replicates == 240 and not whole.converged
    assert "budget" in whole.message and len(whole.stages) == 4
    # stopped by its budget: left unfinished (resumable), read like any experiment
    state = experiment_status(tmp_path / "whole.h5")
    assert state.done == 240
    points = read_points(tmp_path / "whole.h5")
    assert points[PARAMETER].tolist() == pytest.approx(whole.stages["value"].tolist())
    # the first stage lies below the diffusion's threshold (S = -1.5 on its curve), the next above it
    assert whole.stages["value"].iloc[0] < whole.diffusion < whole.stages["value"].iloc[1]
    assert "locate" in read_attrs(tmp_path / "whole.h5")
    # the same design in two goes: 2 stages, then resumed to 4
    part = tmp_path / "part.h5"
    locate(config, PARAMETER, part, budget=120, **kw)
    resumed = locate(config, PARAMETER, part, budget=240, resume=True, **kw)
    assert resumed.stages["value"].tolist() == whole.stages["value"].tolist()
    a, b = read_replicates(tmp_path / "whole.h5"), read_replicates(part)
    assert a.drop(columns="trajectory_start").equals(b.drop(columns="trajectory_start"))
    assert resumed.value == whole.value


def test_locate_refuses_bad_requests(tmp_path):
    from sim.config import ConfigError
    from sim.store import ResultsError

    config = _config()
    with pytest.raises(ConfigError, match="bracket"):
        locate(config, PARAMETER, tmp_path / "x.h5", bracket=(3.5, 2.5))
    with pytest.raises(ConfigError, match="no allele"):
        locate(config, "allele.nobody.fecundity", tmp_path / "x.h5")
    with pytest.raises(ResultsError, match="nothing to resume"):
        locate(config, PARAMETER, tmp_path / "missing.h5", resume=True)


def test_grid_first_passage_stops_at_the_first_look_within_the_tolerance():
    from analysis.locate_bench import grid_first_passage

    fixed = np.zeros((9, 100), bool)
    fixed[:, ::4] = True  # every 4th replicate fixed
    looks = []

    def read(values, counted_fixed, counted):
        looks.append(int(counted[0]))
        assert np.all(counted_fixed == -(-counted // 4))  # cumulative counts, in replicate order
        half = 1.0 / math.sqrt(counted[0])  # a half-width narrowing as 1 / sqrt(n)
        return 3.0, 3.0 - half, 3.0 + half

    got = grid_first_passage(np.linspace(2.7, 3.3, 9), fixed, read, tolerance=0.2, step=10)
    assert got.replicates == 9 * 30 and looks == [10, 20, 30]  # 1/sqrt(30) = 0.18 <= 0.2 < 1/sqrt(20)
    assert math.isinf(grid_first_passage(np.linspace(2.7, 3.3, 9), fixed, read, tolerance=0.01, step=10).replicates)


def test_status_of_an_unfinished_locate_file_gives_the_command_that_goes_on(tmp_path, capsys):
    import shlex

    from analysis.lab.toml_text import toml_text
    from sim.cli import main

    config = tmp_path / "locate.toml"
    config.write_text(toml_text(_config(replicates=40)))
    out = tmp_path / "L.h5"
    assert main(["locate", str(config), "--parameter", PARAMETER, "--bracket", "2.5", "3.5",
                 "--tolerance", "1e-6", "--budget", "80", "-o", str(out), "--workers", "1"]) == 0
    first = read_points(out)[PARAMETER].tolist()
    assert len(first) == 2  # stopped by its budget, unfinished
    capsys.readouterr()
    assert main(["status", str(out)]) == 0
    text = capsys.readouterr().out
    assert "broodline run" not in text
    status = experiment_status(out)
    assert status.state == "stopped" and f"`{status.resume}`" in text
    from analysis.comparison import incomplete_message

    assert f"`{status.resume}`" in incomplete_message(out)  # compare's warning says the same
    # `run --resume` on it would treat its stages as another config: refused, with the same advice
    assert main(["run", str(config), "-o", str(out), "--resume", "--workers", "1"]) == 2
    err = capsys.readouterr().err
    assert "broodline locate wrote it" in err
    assert status.resume.replace("CONFIG", shlex.quote(str(config))) in err  # the config named
    assert experiment_status(out).done == 80  # nothing changed
    command = shlex.split(status.resume.replace("CONFIG", shlex.quote(str(config))))
    assert command[:2] == ["broodline", "locate"] and "--resume" in command
    assert main(command[1:] + ["--workers", "1"]) == 0  # the advice is accepted and goes on
    assert read_points(out)[PARAMETER].tolist()[:2] == first
    assert experiment_status(out).done > 80


def test_locate_stopped_by_ctrl_c_says_how_to_go_on_with_the_same_design(tmp_path, capsys, monkeypatch):
    import analysis.locate
    from sim.cli import main

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    from analysis.lab.toml_text import toml_text

    monkeypatch.chdir(tmp_path)
    (tmp_path / "c.toml").write_text(toml_text(_config()))
    monkeypatch.setattr(analysis.locate, "locate", interrupted)
    assert main(["locate", "c.toml", "--parameter", PARAMETER, "--bracket", "2.5", "3.5",
                 "--tolerance", "0.01", "--budget", "500", "-o", "L.h5"]) == 130
    err = capsys.readouterr().err
    assert (f"broodline locate c.toml --parameter {PARAMETER} --bracket 2.5 3.5 --tolerance 0.01 "
            "--budget 500 -o L.h5 --resume") in err

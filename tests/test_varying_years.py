"""threshold and compare with [environment]: the stochastic theory, its standard errors, in words."""

import copy
import json

import numpy as np

from analysis.commands import threshold_report
from analysis.sweep import predict_configs
from sim.cli import main
from sim.config import parse_config

# Two equally likely years with juvenile survival 0.8 and 0.1 (mean 0.45); iteroparous
# resident B = 2, P = 0.5; semelparous mutant (issue 13's case).
RAW = {
    "experiment": {"seed": 3, "replicates": 10},
    "allele": [{"name": "it", "breeding": "iteroparous", "fecundity": 2.0, "adult_survival": 0.5,
                "juvenile_survival": 0.45},
               {"name": "se", "breeding": "semelparous", "fecundity": 4.0, "juvenile_survival": 0.45}],
    "invasion": {"resident": "it", "mutant": "se", "resident_count": 50},
    "environment": {"year": [{"name": "good", "probability": 0.5, "juvenile_survival": 0.8 / 0.45},
                             {"name": "bad", "probability": 0.5, "juvenile_survival": 0.1 / 0.45}]},
    "sweep": {"allele.se.fecundity": [3.0, 6.0]},
}


TOML = """
[experiment]
seed = 3
[[allele]]
name = "it"
breeding = "iteroparous"
fecundity = 2.0
adult_survival = 0.5
juvenile_survival = 0.45
[[allele]]
name = "se"
breeding = "semelparous"
fecundity = 5.0
juvenile_survival = 0.45
[invasion]
resident = "it"
mutant = "se"
resident_count = 50
[environment]
[[environment.year]]
name = "good"
probability = 0.5
juvenile_survival = 1.7777777777777777
[[environment.year]]
name = "bad"
probability = 0.5
juvenile_survival = 0.2222222222222222
"""


def test_density_free_threshold_is_lewontin_cohens():
    # One-class types: log lambda_s = sum_k p_k log lambda_k exactly (Lewontin & Cohen 1969),
    # so the semelparous threshold is exp(E log(2 c + 0.5) - E log c) = 4.29, above the
    # constant environment's 2 + 0.5 / 0.45 = 3.11 (Charnov & Schaffer 1973). Tolerance:
    # 4.5 of the threshold's own standard error, plus nothing (false failure 7e-6).
    c = np.array([0.8, 0.1])
    exact = np.exp(np.mean(np.log(2 * c + 0.5)) - np.mean(np.log(c)))
    assert abs(exact - 4.29) < 5e-3 and abs(2 + 0.5 / 0.45 - 3.11) < 5e-3
    report = threshold_report(parse_config(RAW))
    (t,) = report["thresholds"]
    assert t.converged and t.invades_above and t.standard_error > 0
    assert abs(t.value - exact) < 4.5 * t.standard_error, (t.value, exact, t.standard_error)
    assert "stochastic" in t.message and "good (probability 0.5)" in t.message
    points = report["points"]
    assert points["verdict"].tolist() == ["does not invade", "invades"]
    assert (points["prediction"] == "stochastic").all()
    # density-free: the mutant's growth rate is exp(log lambda_s), here sum_k p_k log(B c_k)
    assert np.allclose(np.log(points["mutant_growth_rate"]), [np.mean(np.log(b * c)) for b in (3.0, 6.0)],
                       atol=5 * points["stochastic_growth_rate_se"].max())


def test_threshold_json_has_the_stochastic_keys(tmp_path, capsys):
    path = tmp_path / "c.toml"
    path.write_text(TOML)
    assert main(["threshold", str(path), "--json", "--parameter", "allele.se.fecundity",
                 "--bracket", "3", "6"]) == 0
    out = json.loads(capsys.readouterr().out)
    (point,) = out["points"]
    for key in ("stochastic_growth_rate", "stochastic_growth_rate_se", "small_noise_approximation",
                "invasion_fitness_se", "establishment_probability_se", "environment"):
        assert key in point, key
    assert point["verdict"] == "invades" and point["invasion_fitness"] > 1
    assert out["thresholds"][0]["standard_error"] > 0
    assert main(["threshold", str(path)]) == 0
    text = capsys.readouterr().out
    assert "environment: 2 year types" in text and "prediction: stochastic theory" in text


def test_a_constant_config_keeps_its_columns():
    raw = copy.deepcopy(RAW)
    del raw["environment"], raw["sweep"]
    table = predict_configs([parse_config(raw)])
    assert "stochastic_growth_rate" not in table and "prediction" not in table


def test_compare_reads_the_stochastic_prediction(tmp_path, capsys):
    from sim.experiment import run_experiment

    raw = copy.deepcopy(RAW)
    raw["experiment"] = {"seed": 3, "replicates": 6, "max_steps": 200, "engine": "counts"}
    raw["density"] = {"form": "beverton-holt", "acts_on": "recruitment", "capacity": 20}
    del raw["invasion"]["resident_count"]
    out = tmp_path / "env.h5"
    run_experiment(parse_config(raw), out, progress=False)
    assert main(["compare", str(out), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert all("stochastic invasion fitness" in p["prediction"] for p in result["points"])
    assert all(p["stochastic_growth_rate_se"] > 0 and p["invasion_fitness_se"] > 0 for p in result["points"])
    # the verdict is the stochastic one: B_s = 3 and 6 around the threshold 5.34 (K = 20 or any K:
    # the mean-field path scales with K under Beverton-Holt)
    assert [p["verdict"] for p in result["points"]] == ["does not invade", "invades"]
    assert main(["compare", str(out)]) == 0
    assert "prediction: stochastic theory" in capsys.readouterr().out

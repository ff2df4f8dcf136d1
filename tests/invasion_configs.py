"""Configs for the analysis tests: an iteroparous resident against a semelparous mutant.

The defaults are the worked example of the tests: resident B_i = 2, P = 0.5, c = 0.5.
"""

from __future__ import annotations

from sim.config import parse_config


def invasion_config(
    *,
    mutant_fecundity=3.5,
    fecundity=2.0,
    adult_survival=0.5,
    juvenile_survival=0.5,
    mutant_juvenile_survival=None,
    form="beverton-holt",
    acts_on="recruitment",
    counted="census",
    capacity=100.0,
    distribution="poisson",
    dispersion=None,
    mutant_count=1,
    resident_count=None,
    replicates=20,
    seed=1,
    max_steps=5000,
    record_every=1,
    sweep=None,
    mutant=None,
    maturity_age=1,
    resident_extra=None,
):
    """A validated Config: resident 'perennial' (iteroparous) and mutant 'one-shot'.

    ``resident_extra`` adds keys to the resident's allele (e.g. its ``orphan_survival``).
    """
    density = {"form": form}
    if form != "none":
        density |= {"acts_on": acts_on, "counted": counted, "capacity": capacity}
    offspring = {"distribution": distribution}
    if dispersion is not None:
        offspring["dispersion"] = dispersion
    mutant = mutant or {
        "name": "one-shot",
        "breeding": "semelparous",
        "fecundity": mutant_fecundity,
        "juvenile_survival": juvenile_survival
        if mutant_juvenile_survival is None
        else mutant_juvenile_survival,
    }
    raw = {
        "experiment": {
            "name": "test",
            "seed": seed,
            "replicates": replicates,
            "max_steps": max_steps,
            "record_every": record_every,
        },
        "density": density,
        "offspring": offspring,
        "allele": [
            {
                "name": "perennial",
                "breeding": "iteroparous",
                "fecundity": fecundity,
                "adult_survival": adult_survival,
                "juvenile_survival": juvenile_survival,
                "maturity_age": maturity_age,
            } | (resident_extra or {}),
            mutant,
        ],
        "invasion": {
            "resident": "perennial",
            "mutant": mutant["name"],
            "mutant_count": mutant_count,
            "resident_count": resident_count
            if resident_count is not None
            else ("equilibrium" if form != "none" else 50),
        },
    }
    if sweep:
        raw["sweep"] = sweep
    return parse_config(raw)


SMALL_SWEEP = [2.5, 3.5, 4.5, 6.0]


def write_small_results(path, *, replicates=60, seed=3):
    """Run a small invasion sweep (census 30, Beverton-Holt on recruitment) into ``path``."""
    from sim.experiment import run_experiment

    config = invasion_config(
        capacity=30.0,
        replicates=replicates,
        seed=seed,
        record_every=2,
        sweep={"allele.one-shot.fecundity": SMALL_SWEEP},
    )
    run_experiment(config, path, progress=False)
    return path


def wet_and_dry(*, shared=False, **kw):
    """``invasion_config(**kw)`` in wet and dry years (juvenile survival x1.5 or x0.3, each
    with probability 0.5), each replicate with its own years unless ``shared``."""
    raw = invasion_config(**kw).model_dump(exclude_none=True)
    raw["environment"] = {"shared_years": shared,
                          "year": [{"name": "wet", "probability": 0.5, "juvenile_survival": 1.5},
                                   {"name": "dry", "probability": 0.5, "juvenile_survival": 0.3}]}
    return parse_config(raw)

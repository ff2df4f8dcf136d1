"""The resident's environment: its equilibrium, and the density factors a rare mutant meets there.

The equilibrium itself is ``sim.meanfield.solve_equilibrium`` (the density
index D* at which the resident's growth rate is 1; for a ceiling, the removal
fraction phi as a survival factor with census K). This module gathers it
with the resident's demography for the invasion calculations.
"""

from __future__ import annotations

from dataclasses import dataclass

from sim.config import Config, ConfigError
from sim.density import Factors, NoDensity
from sim.meanfield import Equilibrium, solve_equilibrium

from .demography import Demography, schedule_demography

__all__ = ["ResidentEnvironment", "resident_environment", "invasion_pair"]


@dataclass(frozen=True)
class ResidentEnvironment:
    """The environment a rare mutant meets.

    Attributes
    ----------
    resident : str
        The resident allele's name.
    factors : Factors
        Density factors on fecundity, adult survival and recruitment at the
        resident's equilibrium (all 1 without density dependence).
    equilibrium : Equilibrium or None
        The resident's equilibrium (None without density dependence).
    demography : Demography
        The resident's demography in this environment (growth rate 1 at an
        equilibrium; its density-independent growth rate otherwise).
    """

    resident: str
    factors: Factors
    equilibrium: Equilibrium | None
    demography: Demography

    @property
    def density_index(self) -> float:
        """D* (nan without density dependence; K for a ceiling)."""
        return self.equilibrium.density_index if self.equilibrium else float("nan")

    @property
    def census_size(self) -> float:
        """The resident's equilibrium census size, age 1 and older (nan without one)."""
        return self.equilibrium.census_size if self.equilibrium else float("nan")

    @property
    def regulated(self) -> bool:
        """True when the resident sits at a density-regulated equilibrium."""
        return self.equilibrium is not None


def invasion_pair(config: Config) -> tuple[int, int]:
    """Indices of the resident and mutant alleles named by ``[invasion]``."""
    if config.invasion is None:
        raise ConfigError(
            "invasion: the config has no [invasion] table naming a resident and a mutant"
        )
    return config.allele_index(config.invasion.resident), config.allele_index(
        config.invasion.mutant
    )


def resident_environment(config: Config) -> ResidentEnvironment:
    """The resident's equilibrium and the factors it sets, for one (sweep point) config.

    Raises
    ------
    sim.meanfield.NoEquilibriumError
        Where density dependence is present but the resident has no
        equilibrium (it cannot grow from low density, or is not regulated).

    Notes
    -----
    At the equilibrium the resident's dominant eigenvalue is 1 (Caswell 2001,
    ch. 16, density-dependent models). Without density dependence there is
    none; the environment is then the density-free one (all factors 1), and
    the resident grows at its own rate.
    """
    r, _ = invasion_pair(config)
    schedule = config.schedules()[r]
    density, law = config.density_dependence(), config.offspring_distribution()
    if isinstance(density.form, NoDensity):
        return ResidentEnvironment(schedule.name, Factors(), None,
                                   schedule_demography(schedule, offspring=law))
    eq = solve_equilibrium(schedule, density, offspring=law)
    return ResidentEnvironment(
        schedule.name, eq.factors, eq, schedule_demography(schedule, eq.factors, offspring=law)
    )

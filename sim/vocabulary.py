"""The words of the config vocabulary, declared once.

The schema (``sim.config.schema``) builds its ``Literal`` types from these
tuples, so a value outside them is refused when a config is loaded; the
domain modules map the same words to their objects (``sim.density.FORMS``,
``sim.engines.ENGINES``...) and trust validated input. A new word goes here
first; ``tests/test_vocabulary.py`` checks the domain maps name the same words.
This module imports nothing, so any module may import it.
"""

__all__ = [
    "ENGINES", "COUNTING_ENGINES", "STOP_RULES", "TRAJECTORY_MODES", "DENSITY_FORMS", "PLACEMENTS", "COUNTED",
    "DISTRIBUTIONS", "BREEDING", "BROOD_EFFECTS", "OUTCOMES", "DECIDED_WITH_WINNER", "DECIDED", "outcome_name",
    "SWITCHING", "STATIONARY", "YEAR_MULTIPLIERS", "MAX_COUNT",
]

# The largest census count (counts are stored as uint32): the schema refuses configs past it
# and the engines store a capped replicate's last census as this ceiling.
MAX_COUNT = 2**32 - 1

ENGINES = ("individual", "agents", "counts")
# engines that hold a count per class (allele x age), not each individual: a batch's memory
# and its per-season cost do not grow with the population's size
COUNTING_ENGINES = ("counts",)
STOP_RULES = ("fixation", "max-steps")
TRAJECTORY_MODES = ("by-age", "by-allele", "none")
DENSITY_FORMS = ("none", "beverton-holt", "ricker", "ceiling")
PLACEMENTS = ("recruitment", "fecundity", "adult-survival", "all-survival")
COUNTED = ("census", "breeders", "offspring")
DISTRIBUTIONS = ("poisson", "fixed", "negative-binomial")
BREEDING = ("semelparous", "iteroparous", "table", "effort")
BROOD_EFFECTS = ("none", "exponential")  # a young's survival in a brood of b: x 1, x exp(-(b - 1) / h)

# [environment]: how year types follow one another; ``start`` of a Markov chain is a year
# name or STATIONARY; the multipliers a ``[[environment.year]]`` may give (default 1)
SWITCHING = ("iid", "markov")
STATIONARY = "stationary"
YEAR_MULTIPLIERS = ("fecundity", "adult_survival", "juvenile_survival")

# A replicate's outcome (the ``outcome`` column of /replicates). The order is the summary
# table's column order.
OUTCOMES = ("mutant-fixed", "mutant-lost", "fixed", "extinct", "undecided", "capped")
DECIDED_WITH_WINNER = ("mutant-fixed", "mutant-lost", "fixed")  # one allele is left: it has a winner
DECIDED = DECIDED_WITH_WINNER + ("extinct",)  # outcomes that hold from a season on (fixation_step)
_OUTCOME_ALIASES = {"unresolved": "undecided"}  # the one idea's other name in earlier tables


def outcome_name(text: str) -> str:
    """An outcome as this version spells it (one of ``OUTCOMES``), whatever a file wrote.

    Files from other versions may write ``mutant_fixed`` for ``mutant-fixed``,
    or ``unresolved`` for ``undecided``; each is read as the one name.
    """
    text = _OUTCOME_ALIASES.get(text, text)
    for name in OUTCOMES:
        if text.replace("_", "-") == name:
            return name
    return text

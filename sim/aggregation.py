"""When counts by allele and age describe a config exactly (the ``counts`` engine's domain).

The counts engine is exact in distribution wherever individuals of one
(allele, age) class are exchangeable: nothing else about an individual is
kept or inherited. An option that gives individuals more than that (lineage
recording, a per-individual trait, a parent's fate affecting its young) adds
a ``PerIndividualFeature`` to ``PER_INDIVIDUAL_FEATURES``; ``counts_obstacles``
then names it, ``broodline check`` reports it, and a config asking for
``engine = "counts"`` with it is refused.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

__all__ = ["PER_INDIVIDUAL_FEATURES", "PerIndividualFeature", "counts_obstacles"]


@dataclass(frozen=True)
class PerIndividualFeature:
    """A config option that gives individuals state beyond allele and age.

    Attributes
    ----------
    key : str
        The config key that turns it on (named in messages).
    present : callable
        ``present(config) -> bool``: whether the config uses it.
    reason : str
        Why counts cannot represent it.
    """

    key: str
    present: Callable
    reason: str


# None of the current options keeps per-individual state; lineage recording and
# per-individual traits register here when they are added.
PER_INDIVIDUAL_FEATURES: list[PerIndividualFeature] = []


def counts_obstacles(config) -> list[str]:
    """Why the ``counts`` engine would not be exact for ``config``: one message per reason.

    An empty list means counts by (allele, age) carry everything the model
    needs, so the counts engine is exact in distribution.
    """
    return [f"{feature.key}: {feature.reason}"
            for feature in PER_INDIVIDUAL_FEATURES if feature.present(config)]

"""The config vocabulary is declared once (sim/vocabulary.py): the schema and the domain maps
name the same words."""

import typing

import pytest

from sim import density, vocabulary
from sim.config import AlleleSection, DensitySection, ExperimentSection, OffspringSection
from sim.engines import ENGINES
from sim.offspring import make_offspring


def _words(model, field):
    annotation = model.model_fields[field].annotation
    options = (annotation,) if typing.get_origin(annotation) is typing.Literal \
        else typing.get_args(annotation)  # Literal[...] | None
    literal = next(a for a in options if typing.get_origin(a) is typing.Literal)
    return typing.get_args(literal)


@pytest.mark.parametrize("model, field, words", [
    (ExperimentSection, "engine", vocabulary.ENGINES),
    (ExperimentSection, "stop", vocabulary.STOP_RULES),
    (ExperimentSection, "trajectory", vocabulary.TRAJECTORY_MODES),
    (DensitySection, "form", vocabulary.DENSITY_FORMS),
    (DensitySection, "acts_on", vocabulary.PLACEMENTS),
    (DensitySection, "counted", vocabulary.COUNTED),
    (OffspringSection, "distribution", vocabulary.DISTRIBUTIONS),
    (AlleleSection, "breeding", vocabulary.BREEDING),
])
def test_the_schema_reads_the_vocabulary(model, field, words):
    assert _words(model, field) == words


def test_the_domain_maps_name_the_same_words():
    assert tuple(ENGINES) == vocabulary.ENGINES
    assert tuple(density.FORMS) == vocabulary.DENSITY_FORMS
    assert tuple(density.PLACEMENTS) == vocabulary.PLACEMENTS
    assert tuple(density._PLACED) == vocabulary.PLACEMENTS  # where each placement's factor acts
    assert tuple(density.COUNTED) == vocabulary.COUNTED
    for word in vocabulary.DISTRIBUTIONS:
        assert make_offspring(word, 1.0 if word == "negative-binomial" else None) is not None

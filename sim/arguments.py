"""argparse types of the command line's options, shared by sim's and analysis's commands (which
do not import ``sim.cli``): a bad value is refused by the parser, naming the option (exit
status 2), before anything runs. Imports nothing heavy."""

from __future__ import annotations

import argparse
import math

__all__ = ["positive", "positive_number"]


def positive(text: str) -> int:
    """argparse type: a whole number >= 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number; got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be >= 1; got {value}")
    return value


def positive_number(text: str) -> float:
    """argparse type: a finite number > 0 (not nan, not inf)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a number; got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be a finite number; got {text}")
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be > 0; got {text}")
    return value

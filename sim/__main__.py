"""``python -m sim``: the broodline command line."""

if __name__ == "__main__":
    # imported here, not above: a spawned worker process imports this module as
    # ``__mp_main__`` and needs none of the command line
    import sys

    from sim.cli import entry_point

    sys.exit(entry_point())

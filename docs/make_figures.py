"""Make the documentation's figures by running the demo and the example configs.

    python docs/make_figures.py                 # everything (about 10 minutes on 2 cores)
    python docs/make_figures.py --only effort   # one group: demo, examples, effort, lab

Writes PNG files into ``docs/images/`` (committed: the docs build reads them and
never runs a simulation). Nothing there is drawn by hand:

- ``demo-*.png``: ``broodline demo`` (its fixation, trajectories and invasion
  fitness figures);
- ``NAME-*.png`` for each example config ``configs/NAME.toml`` other than the
  demo: ``broodline run`` then ``broodline plot`` (an invasion's figures, or a
  trait run's ``trait``);
- ``pairwise_invasibility.png``, ``selection_gradient.png``: the reproductive
  effort example of docs/effort.md (``analysis.invasibility``);
- ``lab.png``: the screenshot the lab's browser test takes
  (``tests/test_lab_browser.py``), copied from the test's folder.

Run it from the repository root after a change that moves a figure, and commit
the images with the change.
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
IMAGES = ROOT / "docs" / "images"
FIGURES = ("fixation", "trajectories", "invasion_fitness")
GROUPS = ("demo", "examples", "effort", "lab")


def broodline(*args: str) -> None:
    """Run one ``broodline`` command line from the repository root; stop on failure."""
    command = [sys.executable, "-m", "sim", *args]
    print("+ broodline", " ".join(args), flush=True)
    subprocess.run(command, cwd=ROOT, check=True)


def copy_figures(folder: Path, prefix: str) -> None:
    """Copy the figures ``broodline plot`` wrote into ``folder`` that the pages show (an
    invasion's ``FIGURES``, or a trait run's ``trait``)."""
    names = [name for name in (*FIGURES, "trait") if (folder / f"{name}.png").exists()]
    if not names:
        raise SystemExit(f"broodline plot wrote none of {FIGURES + ('trait',)} into {folder}")
    for name in names:
        shutil.copyfile(folder / f"{name}.png", IMAGES / f"{prefix}-{name}.png")


def demo(work: Path) -> None:
    broodline("demo", "-o", str(work / "demo"), "--quiet")
    copy_figures(work / "demo", "demo")


def examples(work: Path) -> None:
    for config in sorted((ROOT / "configs").glob("*.toml")):
        if config.stem == "demo":  # the demo group runs it
            continue
        results = work / f"{config.stem}.h5"
        broodline("run", str(config), "-o", str(results), "--quiet", "--overwrite")
        broodline("plot", str(results), "-o", str(work / config.stem), "--overwrite")
        copy_figures(work / config.stem, config.stem)


def effort(work: Path) -> None:
    sys.path.insert(0, str(ROOT))
    from analysis.adaptive import EffortModel
    from analysis.invasibility import invasibility
    from sim.density import DensityDependence
    from sim.tradeoff import TradeOff

    # the example of docs/effort.md
    model = EffortModel(TradeOff(3.0, 0.5, 0.9, 1.0), juvenile_survival=0.5, maturity_age=1,
                        density=DensityDependence.from_names("beverton-holt", 500, "recruitment"))
    invasibility(model, work / "effort")
    for name in ("pairwise_invasibility", "selection_gradient"):
        shutil.copyfile(work / "effort" / f"{name}.png", IMAGES / f"{name}.png")


def lab(work: Path) -> None:
    base = work / "lab-test"
    subprocess.run(
        [sys.executable, "-m", "pytest", "tests/test_lab_browser.py", "-q", "-p", "no:cacheprovider",
         "-k", "runs_replicates_and_saves", f"--basetemp={base}"],
        cwd=ROOT, check=True,
    )
    shots = sorted(base.rglob("lab-replicates.png"))
    if not shots:
        raise SystemExit("the lab's browser test took no screenshot (is chromium installed?)")
    shutil.copyfile(shots[0], IMAGES / "lab.png")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", nargs="+", choices=GROUPS, default=list(GROUPS))
    args = parser.parse_args(argv)
    IMAGES.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="broodline-figures-") as tmp:
        for group in args.only:
            globals()[group](Path(tmp))
    print(f"figures written to {IMAGES}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

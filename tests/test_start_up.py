"""What each process imports before it works: the command line, the writer, the workers.

A run's fixed cost is mostly imports (numpy, pydantic, h5py, numba, pandas,
scipy), so each process loads only what it uses: the command line's parser
nothing heavy; the writer no numba (its workers run the batches) and no scipy;
worker processes start from a fork server that loaded the engines once
(``sim.parallel.start``). These are checks of the import graph at run time, not
timings (speed goes in ``broodline bench --scaling``)."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from sim.parallel import ProcessPool
from sim.parallel.start import worker_context

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("pandas", "scipy", "numba", "h5py", "pydantic", "matplotlib", "mesa", "dask")


def _loaded_after(code: str) -> set[str]:
    probe = f"import sys, json\n{code}\nprint(json.dumps(sorted(m for m in {HEAVY!r} if m in sys.modules)))"
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT,
                          check=True, timeout=120)
    return set(json.loads(done.stdout.strip().splitlines()[-1]))


def test_the_command_line_parser_imports_nothing_heavy():
    assert _loaded_after("from sim.cli import build_parser\nbuild_parser()") == set()


def test_python_dash_m_sim_help_imports_nothing_heavy():
    # the module a spawned worker imports as __mp_main__ when the writer is `python -m sim`
    assert _loaded_after("import runpy, sim.__main__") == set()


def test_the_writer_imports_neither_numba_nor_scipy(tmp_path):
    config = tmp_path / "c.toml"
    config.write_text(
        '[experiment]\nname = "w"\nseed = 1\nreplicates = 4\nmax_steps = 50\n'
        '[density]\nform = "beverton-holt"\nacts_on = "recruitment"\ncapacity = 30\n'
        '[[allele]]\nname = "a"\nbreeding = "iteroparous"\nfecundity = 2.0\n'
        'adult_survival = 0.5\njuvenile_survival = 0.5\n'
        '[[allele]]\nname = "b"\nbreeding = "semelparous"\nfecundity = 4.0\njuvenile_survival = 0.5\n'
        '[invasion]\nresident = "a"\nmutant = "b"\nmutant_count = 1\nresident_count = "equilibrium"\n')
    out = tmp_path / "r.h5"
    loaded = _loaded_after(
        "from sim.cli import main\n"
        f"assert main(['run', {str(config)!r}, '-o', {str(out)!r}, '--workers', '2', '--quiet']) == 0")
    assert "numba" not in loaded and "scipy" not in loaded
    assert {"h5py", "pydantic", "pandas"} <= loaded  # the file, the config, the summary table


def _modules_in_worker() -> list[str]:
    return sorted(m for m in HEAVY if m in sys.modules)


@pytest.mark.skipif(worker_context().get_start_method() != "forkserver", reason="no fork server here")
def test_workers_start_with_the_engines_loaded_by_the_fork_server():
    pool = ProcessPool(2)
    try:
        loaded = set(pool._executor.submit(_modules_in_worker).result(timeout=120))
    finally:
        pool.shutdown()
    assert {"numba", "h5py", "pydantic"} <= loaded  # loaded once, in the server, before forking
    assert "pandas" not in loaded and "matplotlib" not in loaded

"""Write the pinned replicates of ``tests/test_pinned_replicates.py``: the example configs of
``configs/`` (and the demo on the engines the examples do not use), run small with the checkout
at hand, as its results files hold them, each beside the config text it ran.

``replicates_v0_2_0.json`` in this folder was written by version 0.2.0 (commit def1913), run
from its checkout with the command line that version and this one share:

    cd CHECKOUT && python /path/to/pin_replicates.py /path/to/replicates_v0_2_0.json

Only the command line (``python -m sim run``) and h5py are used, so any version can run it.
"""

import hashlib
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import h5py
import numpy as np

# name -> (example config, engine to set or None, replicates, max_steps or None): small enough
# to run in seconds, long enough that most replicates end by fixation or loss
CASES = {
    "demo": ("demo", None, 12, None),
    "cinderwort-ages": ("cinderwort-ages", None, 16, None),
    "duskmote-care": ("duskmote-care", None, 16, None),
    "fenmarrow-hopper": ("fenmarrow-hopper", None, 16, None),
    "nookshell-crevices": ("nookshell-crevices", None, 16, None),
    "tallowcap-effort": ("tallowcap-effort", None, 2, 400),
    "demo-counts": ("demo", "counts", 40, None),
    "demo-agents": ("demo", "agents", 3, None),
}
COLUMNS = ("point", "replicate", "outcome", "winner", "steps", "fixation_step", "final_census",
           "trajectory_length")


def config_text(example: str, engine: str | None, configs: Path) -> str:
    """An example config's text, with ``experiment.engine`` set if ``engine`` is given."""
    text = (configs / f"{example}.toml").read_text()
    if engine is not None:
        text = text.replace("[experiment]\n", f'[experiment]\nengine = "{engine}"\n', 1)
    return text


def digest(values: np.ndarray) -> str:
    """sha256 of an array's values in C order, little-endian, with its shape."""
    values = np.ascontiguousarray(values)
    data = values.astype(values.dtype.newbyteorder("<"), copy=False).tobytes()
    return hashlib.sha256(repr(values.shape).encode() + data).hexdigest()


def read_pinned(path) -> dict:
    """What is pinned of one results file: the replicate columns (lists), and a digest of
    every dataset under /trajectories and /years."""
    with h5py.File(path, "r") as f:
        reps = f["replicates"]
        columns = {name: (reps[name].asstr()[()].tolist() if name == "outcome"
                          else reps[name][()].tolist()) for name in COLUMNS}
        digests = {}

        def add(name, obj):
            if isinstance(obj, h5py.Dataset):
                digests[obj.name.lstrip("/")] = digest(obj[()])

        for group in ("trajectories", "years"):
            if group in f:
                f[group].visititems(add)
    return {"columns": columns, "digests": digests}


def main(out: str) -> None:
    pinned = {}
    with tempfile.TemporaryDirectory() as folder:
        for name, (example, engine, replicates, max_steps) in CASES.items():
            text = config_text(example, engine, Path.cwd() / "configs")
            config, results = Path(folder) / f"{name}.toml", Path(folder) / f"{name}.h5"
            config.write_text(text)
            command = [sys.executable, "-m", "sim", "run", str(config), "-o", str(results),
                       "--replicates", str(replicates), "--workers", "1", "--quiet"]
            if max_steps is not None:
                command += ["--max-steps", str(max_steps)]
            subprocess.run(command, check=True, env={**os.environ, "PYTHONPATH": str(Path.cwd())})
            pinned[name] = {"config": text, "replicates": replicates, "max_steps": max_steps,
                            **read_pinned(results)}
    Path(out).write_text(json.dumps(pinned, indent=1) + "\n")


if __name__ == "__main__":
    main(sys.argv[1])

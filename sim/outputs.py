"""Where a command may write a file: not over one of its own inputs, not onto a folder.

Checked before anything runs, whatever ``--overwrite`` says: replacing a
results file or a config by the report, table or results made from it loses
the input for good.
"""

from __future__ import annotations

import os
from pathlib import Path

from .errors import UserError

__all__ = ["check_output_file", "free_outputs"]


def check_output_file(output, *, inputs=(), option: str = "-o") -> None:
    """Refuse ``output`` (a file a command is about to write) when it is a folder or the same
    file as one of ``inputs``; ``option`` names it in the message."""
    out = Path(output)
    if out.is_dir():
        raise UserError(f"{option} {out}: is a folder; give the file to write")
    for given in inputs:
        if out.exists() and Path(given).exists() and os.path.samefile(out, given):
            raise UserError(f"{option} {out}: is the input {str(given)!r} itself; writing there "
                            "would destroy it (give another file name)")


def free_outputs(paths, overwrite: bool, *, inputs=(), option: str = "-o") -> None:
    """Refuse, before anything is written, to replace existing ``paths`` unless ``overwrite``,
    and to write over a folder or one of ``inputs`` at all (``check_output_file``)."""
    for p in paths:
        check_output_file(p, inputs=inputs, option=option)
    taken = [str(p) for p in paths if Path(p).exists()]
    if taken and not overwrite:
        raise FileExistsError(
            f"{', '.join(taken)} exist{'s' if len(taken) == 1 else ''}; pass --overwrite to replace"
        )
    for p in paths:
        if not Path(p).parent.exists():
            raise FileNotFoundError(f"output folder {str(Path(p).parent)!r} does not exist")

"""Damaged results files and shards (issue 11): every command ends in one line naming the file.

The checks live in the readers (``sim.store.readers``, ``sim.store.layout``), so ``status``,
``compare``, ``plot`` and ``report`` all get them.
"""

import shutil

import h5py
import pytest

from sim.cli import main
from sim.config import config_hash, parse_config
from sim.describe import preflight
from sim.experiment import run_experiment
from sim.parallel import run_batch
from sim.status import experiment_status
from sim.store import ResultsError, ResultsWriter, parts_dir, read_replicates
from tests.runs_support import small_config, write_config

REPLICATES = 6


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    where = tmp_path_factory.mktemp("finished")
    out = where / "out.h5"
    run_experiment(small_config(replicates=REPLICATES), out, progress=False)
    return out


def _copy(finished, tmp_path):
    out = tmp_path / "out.h5"
    shutil.copy(finished, out)
    return out


def _one_line(capsys, *argvs):
    for argv in argvs:
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        # one error line, and nothing but log lines (time-stamped) before it
        assert err.count("error:") == 1 and "Traceback" not in err, err
        assert all(line[:2].isdigit() for line in err.splitlines()[:-1]), err
        yield err


def _commands(out, tmp_path):
    return [["status", str(out)], ["compare", str(out)], ["plot", str(out), "-o", str(tmp_path / "figs")],
            ["report", str(out), "-o", str(tmp_path / "report.html")]]


def test_a_deleted_dataset(finished, tmp_path, capsys):
    out = _copy(finished, tmp_path)
    with h5py.File(out, "a") as f:
        del f["replicates"]["outcome"]
    for err in _one_line(capsys, *_commands(out, tmp_path)):
        assert "out.h5' cannot be read" in err


def test_a_corrupted_file_structure(finished, tmp_path, capsys):
    out = _copy(finished, tmp_path)
    with h5py.File(out, "r") as f:  # overwrite the B-tree of the outcome column's chunks
        outcome = f["replicates"]["outcome"].id
        where = outcome.get_offset() or outcome.get_chunk_info(0).byte_offset
    data = bytearray(out.read_bytes())
    data[where:where + 512] = b"\xa5" * 512
    out.write_bytes(bytes(data))
    for err in _one_line(capsys, *_commands(out, tmp_path)):
        assert "out.h5" in err


def test_a_file_with_only_the_format_attribute(tmp_path, capsys):
    out = tmp_path / "out.h5"
    with h5py.File(out, "w") as f:
        f.attrs["format"] = "broodline-results"
    for err in _one_line(capsys, *_commands(out, tmp_path)):
        assert "out.h5' cannot be read: its header lacks config" in err


def test_a_newer_format_is_refused_with_the_versions(finished, tmp_path, capsys):
    out = _copy(finished, tmp_path)
    with h5py.File(out, "a") as f:
        f.attrs["format_version"] = 99
    for err in _one_line(capsys, *_commands(out, tmp_path)):
        assert "results format 99, newer than this broodline reads (formats 1 to 3)" in err
    config = write_config(tmp_path)
    err, = _one_line(capsys, ["run", str(config), "-o", str(out), "--resume", "--quiet", "--workers", "1"])
    assert "format 99" in err


def _stopped(tmp_path, batches):
    """A run stopped with the given (point, first, last) batches saved as shards."""
    config = small_config(replicates=REPLICATES)
    out = tmp_path / "out.h5"
    points = preflight(config)
    writer = ResultsWriter(out, config, points)
    for point, first, last in batches:
        writer.write(run_batch(points[point], first, last, config.experiment.seed))
    writer.release()
    return config, out


@pytest.mark.parametrize("damage", [b"", b"garbage" * 100, "truncated"])
def test_a_bad_shard_is_named_and_resume_runs_it_again(tmp_path, capsys, damage):
    config, out = _stopped(tmp_path, [(0, 0, 2), (0, 3, 5)])
    shard = parts_dir(out) / "p000000-r000000003-000000005.h5"
    shard.write_bytes(shard.read_bytes()[:600] if damage == "truncated" else damage)
    err, = _one_line(capsys, ["status", str(out)])
    assert "p000000-r000000003-000000005.h5' cannot be read" in err and "--resume" in err
    path = write_config(tmp_path, replicates=REPLICATES)
    assert main(["run", str(path), "-o", str(out), "--resume", "--quiet", "--workers", "1"]) == 0
    assert "runs again" in capsys.readouterr().err
    assert len(read_replicates(out)) == 4 * REPLICATES


def test_status_counts_neither_overlapping_nor_out_of_range_shards(tmp_path):
    config, out = _stopped(tmp_path, [(0, 0, 2), (1, 0, 5)])
    parts = parts_dir(out)
    shutil.copy(parts / "p000001-r000000000-000000005.h5", parts / "p000001-r000000002-000000007.h5")  # overlaps
    shutil.copy(parts / "p000000-r000000000-000000002.h5", parts / "p000009-r000000000-000000002.h5")  # no point 9
    shutil.copy(parts / "p000000-r000000000-000000002.h5", parts / "p000002-r000000004-000000006.h5")  # past 5
    status = experiment_status(out)
    assert status.done == 3 + REPLICATES
    assert status.table["done"].tolist() == [3, REPLICATES, 0, 0]


def test_a_shard_of_another_config_is_refused_not_merged(tmp_path, capsys):
    config, out = _stopped(tmp_path, [(0, 0, 2)])
    # a shard written by a run with another seed, dropped into the parts folder
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    raw_other = small_config(replicates=REPLICATES).model_dump()
    raw_other["experiment"]["seed"] = 1
    other_config = parse_config({k: v for k, v in raw_other.items() if v is not None})
    assert config_hash(other_config) != config_hash(config)
    points = preflight(other_config)
    writer = ResultsWriter(elsewhere / "out.h5", other_config, points)
    writer.write(run_batch(points[0], 3, 5, 1))
    writer.release()
    shutil.copy(parts_dir(elsewhere / "out.h5") / "p000000-r000000003-000000005.h5", parts_dir(out))
    with pytest.raises(ResultsError, match=r"p000000-r000000003-000000005\.h5' was written by another config"):
        ResultsWriter(out, config, preflight(config), resume=True)


from tests.test_faults import tiny_fs  # noqa: E402,F401  (the fixture: a small tmpfs)


@pytest.mark.size("64k")
def test_too_little_space_for_the_header_is_one_line(tiny_fs, tmp_path, capsys):  # noqa: F811
    filler = tiny_fs / "someone-else.bin"
    with open(filler, "wb", buffering=0) as f:
        try:
            while True:
                f.write(b"\0" * 1024)
        except OSError:
            pass
    config = write_config(tmp_path)
    err, = _one_line(capsys, ["run", str(config), "-o", str(tiny_fs / "out.h5"), "--workers", "1"])
    assert "could not start" in err and "No space left on device" in err
    assert not (tiny_fs / "out.h5.tmp").exists() and not (tiny_fs / "out.h5").exists()


@pytest.mark.parametrize("kind", ["fifo", "device"])
def test_overwrite_refuses_what_is_not_a_regular_file(tmp_path, capsys, kind):
    import os
    if kind == "fifo":
        target = tmp_path / "pipe.h5"
        os.mkfifo(target)
    else:
        target = tmp_path / "null.h5"
        target.symlink_to(os.devnull)  # the null device, reached through a link
    config = write_config(tmp_path)
    err, = _one_line(capsys, ["run", str(config), "-o", str(target), "--overwrite", "--workers", "1"])
    assert "is not a regular file" in err
    assert not target.is_file() and (kind == "fifo" or os.path.exists(os.devnull))


def test_the_end_of_run_summary_streams_the_outcomes(finished):
    from sim.outcomes import summarize
    from sim.store import count_outcomes, read_outcomes, read_points
    # per (point, outcome) counts, read in chunks, give the table of every row read at once
    counted = summarize(count_outcomes(finished), read_points(finished))
    assert counted.equals(summarize(read_outcomes(finished), read_points(finished)))
    assert counted["replicates"].tolist() == [REPLICATES] * 4


def test_more_workers_than_cores_warns(tmp_path, capsys):
    import os
    config = write_config(tmp_path, replicates=2)
    many = len(os.sched_getaffinity(0)) + 1
    assert main(["run", str(config), "-o", str(tmp_path / "out.h5"), "--workers", str(many), "--quiet"]) == 0
    assert f"--workers {many} is more than the" in capsys.readouterr().err

"""Faults: unwritable output, a full disk, an exploding population; clear messages, nothing lost."""

import errno
import subprocess
import tomllib
from pathlib import Path

import pytest

import sim.parallel.start
import sim.store as store
from sim.cli import main
from sim.config import parse_config
from sim.experiment import run_experiment
from sim.store import ResultsError, parts_dir, read_replicates
from tests.runs_support import BATCH, REPLICATES, assert_same_datasets, small_config, write_config


def _mount_tmpfs(where: Path, options: str) -> bool:
    where.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)],
                          capture_output=True, check=False)
    return done.returncode == 0


@pytest.fixture
def tiny_fs(tmp_path, request):
    """A small filesystem, 160 KiB unless the test's ``size`` mark says (needs permission to mount)."""
    mark = request.node.get_closest_marker("size")
    where = tmp_path / "tiny"
    try:
        mounted = _mount_tmpfs(where, f"size={mark.args[0] if mark else '160k'}")
    except FileNotFoundError:
        mounted = False
    if not mounted:
        pytest.skip("cannot mount a tiny tmpfs here")
    yield where
    subprocess.run(["umount", str(where)], check=False)


def test_output_folder_missing_or_a_file(tmp_path, capsys):
    config = write_config(tmp_path)
    assert main(["run", str(config), "-o", str(tmp_path / "nowhere" / "out.h5")]) == 2
    assert "output folder" in capsys.readouterr().err
    (tmp_path / "plain").write_text("")
    assert main(["run", str(config), "-o", str(tmp_path / "plain" / "out.h5")]) == 2
    assert "is not a folder" in capsys.readouterr().err


def test_read_only_output_folder(tmp_path, capsys):
    where = tmp_path / "ro"
    try:
        mounted = _mount_tmpfs(where, "ro,size=64k")
    except FileNotFoundError:
        mounted = False
    if not mounted:
        pytest.skip("cannot mount a read-only tmpfs here")
    try:
        config = write_config(tmp_path)
        assert main(["run", str(config), "-o", str(where / "out.h5"), "--workers", "1"]) == 2
        err = capsys.readouterr().err
        assert "is not writable (no permission, or a read-only file system)" in err
        assert "Traceback" not in err
    finally:
        subprocess.run(["umount", str(where)], check=False)


def test_a_write_error_mid_run_keeps_what_was_saved(tmp_path, monkeypatch, capsys):
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "out.h5"
    real = store.shards._fill_shard  # what saves a shard, in the writer or in a worker
    calls = []

    def fill_then_fail(f, target, results):
        calls.append(1)
        if len(calls) == 4:
            raise OSError(errno.ENOSPC, "No space left on device")
        real(f, target, results)

    monkeypatch.setattr(store.shards, "_fill_shard", fill_then_fail)
    # as on a one-core machine, --workers 1 runs the batches in this process, which sees the
    # patch (elsewhere the one worker is a process of its own: sim.parallel.start.separate_workers)
    monkeypatch.setattr(sim.parallel.start, "default_workers", lambda: 1)
    argv = ["run", str(config), "-o", str(out), "--workers", "1", "--batch-size", str(BATCH), "--quiet"]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and f"The {3 * BATCH} replicates already saved are intact" in err
    assert "--resume" in err
    assert len(read_replicates(out)) == 3 * BATCH
    assert not list(parts_dir(out).glob("*.tmp"))
    monkeypatch.undo()
    assert main([*argv, "--resume"]) == 0
    assert len(read_replicates(out)) == 4 * REPLICATES


def test_a_full_disk_mid_run_then_resume_elsewhere(tiny_fs, tmp_path, capsys):
    # trajectories every season of a few hundred replicates do not fit in 160 KiB
    config = write_config(tmp_path, replicates=200, record_every=1)
    out = tiny_fs / "out.h5"
    assert main(["run", str(config), "-o", str(out), "--workers", "1", "--batch-size", "4",
                 "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and "already saved are intact" in err
    saved = read_replicates(out)
    assert 0 < len(saved) < 800
    assert not list(parts_dir(out).glob("*.tmp"))
    reference = tmp_path / "ref.h5"
    run_experiment(small_config(replicates=200, record_every=1), reference, progress=False)
    ref = read_replicates(reference).set_index(["point", "replicate"])
    assert (saved.set_index(["point", "replicate"])["final_census"]
            == ref.loc[saved.set_index(["point", "replicate"]).index, "final_census"]).all()


def test_a_failing_merge_keeps_the_shards(tmp_path, monkeypatch, capsys):
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tmp_path / "out.h5"

    def no_room(self, *, complete=False):  # writing the merged file's rows
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(store.writer._MergedFile, "_write", no_room)
    argv = ["run", str(config), "-o", str(out), "--workers", "1", "--quiet"]
    assert main(argv) == 2
    assert "intact (as shards)" in capsys.readouterr().err
    assert len(read_replicates(out)) == 4 * REPLICATES
    monkeypatch.undo()
    assert main([*argv, "--resume"]) == 0
    assert store.read_attrs(out)["complete"] and not parts_dir(out).exists()


def test_an_exploding_population_is_capped_and_the_experiment_goes_on(tmp_path, capsys):
    # no density dependence and a growth rate of 3 (fixed 6 offspring, c = 0.5): every
    # replicate passes max_population; they are marked capped and the experiment finishes
    text = """
[experiment]
name = "boom"
replicates = 5
max_steps = 300
stop = "max-steps"
max_population = 2000

[offspring]
distribution = "fixed"

[[allele]]
name = "weed"
breeding = "semelparous"
fecundity = 6.0
juvenile_survival = 0.5
initial_count = 3

[sweep]
"allele.weed.fecundity" = [6.0, 1.0]
"""
    config_path = tmp_path / "boom.toml"
    config_path.write_text(text)
    parse_config(tomllib.loads(text))
    out = tmp_path / "boom.h5"
    assert main(["run", str(config_path), "-o", str(out), "--workers", "1", "--quiet"]) == 0
    captured = capsys.readouterr()
    assert "5 replicates passed experiment.max_population = 2000" in captured.err
    assert "(points 0)" in captured.err
    reps = read_replicates(out)
    assert (reps[reps["point"] == 0]["outcome"] == "capped").all()
    assert (reps[reps["point"] == 0]["final_census"] > 2000).all()
    assert (reps[reps["point"] == 1]["outcome"] == "extinct").all()  # the other point ran on


def test_overwrite_and_resume_together_are_refused(tmp_path):
    with pytest.raises(ResultsError, match="choose one of overwrite"):
        run_experiment(small_config(), tmp_path / "x.h5", overwrite=True, resume=True)


@pytest.mark.size("2m")
def test_a_full_disk_during_the_merge_keeps_the_shards(tiny_fs, tmp_path, monkeypatch, capsys):
    # the shards fit; then the disk fills up (another program's file) just before the merge
    config = write_config(tmp_path, replicates=REPLICATES)
    out = tiny_fs / "out.h5"
    filler = tiny_fs / "someone-else.bin"
    real_finalize = store.ResultsWriter.finalize

    def fill_disk_then_finalize(self):
        with open(filler, "wb", buffering=0) as f:
            try:
                while True:
                    f.write(b"\0" * 4096)
            except OSError:
                pass
        return real_finalize(self)

    monkeypatch.setattr(store.ResultsWriter, "finalize", fill_disk_then_finalize)
    argv = ["run", str(config), "-o", str(out), "--workers", "1", "--quiet"]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and "intact (as shards)" in err
    assert "Traceback" not in err
    assert len(read_replicates(out)) == 4 * REPLICATES and not store.read_attrs(out)["complete"]
    assert not (tiny_fs / "out.h5.tmp").exists()
    monkeypatch.undo()
    filler.unlink()
    assert main([*argv, "--resume"]) == 0
    reference = tmp_path / "ref.h5"
    run_experiment(small_config(replicates=REPLICATES), reference, progress=False)
    assert_same_datasets(reference, out)


def test_a_file_that_cannot_be_started_leaves_no_folder_behind(tmp_path, monkeypatch, capsys):
    # a full disk as the header is written: the message says nothing was written, and the
    # shards' folder this run made for its lock is gone too (common practice: a failed start
    # leaves the output folder as it was)
    config = write_config(tmp_path)
    out = tmp_path / "out.h5"

    def full_disk(path, fill):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(store.writer.durable, "write_atomic", full_disk)
    assert main(["run", str(config), "-o", str(out), "--workers", "1", "--quiet"]) == 2
    assert "nothing was written" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == [config.name]

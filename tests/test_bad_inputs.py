"""Hostile configs (issue 11): each is refused with one message naming its key, or runs cleanly.

Nothing here is a statistical check: every case is a config that once passed ``check`` and
then crashed, ran out of memory or ran to silent nonsense.
"""

import copy
import re

import pytest

from analysis.lab.toml_text import raw_toml_text
from sim.cli import main
from sim.config import ConfigError, load_config, parse_config
from tests.conftest import BASE


def _raw(**changes):
    """BASE with ``section__key`` (``allele0__key``: allele 0's) or a whole ``section`` (``allele1``:
    allele 1) set; None deletes."""
    raw = copy.deepcopy(BASE)
    for where, value in changes.items():
        section, _, key = where.partition("__")
        if not key:
            if section.startswith("allele"):
                raw["allele"][int(section[-1])] = value
            else:
                raw[section] = value
            continue
        node = raw["allele"][int(section[-1])] if section.startswith("allele") else \
            raw.setdefault(section, {})
        if value is None:
            node.pop(key, None)
        else:
            node[key] = value
    return raw


STRICT = [
    (dict(experiment__replicates="20"), r"experiment\.replicates must be a whole number .*got '20'"),
    (dict(experiment__seed=True), r"experiment\.seed must be a whole number, not true or false"),
    (dict(experiment__replicates=20.0), r"experiment\.replicates"),
    (dict(allele1__fecundity="4.5"), r"allele\[1\]\.fecundity must be a number .*got '4\.5'"),
    (dict(density__capacity=False), r"density\.capacity must be a number, not true or false"),
    (dict(invasion__mutant_count="1"), r"invasion\.mutant_count must be a whole number"),
    (dict(invasion__resident_count=True), r"invasion\.resident_count must be 'equilibrium' or"),
]

NOT_FINITE = [
    (dict(allele1__fecundity=float("nan")), r"allele\[1\]\.fecundity must be a finite number; got nan"),
    (dict(allele0__fecundity=float("inf")), r"allele\[0\]\.fecundity must be a finite number; got inf"),
    (dict(allele1__juvenile_survival=float("nan")), r"allele\[1\]\.juvenile_survival must be a finite"),
    (dict(density__capacity=float("inf")), r"density\.capacity must be a finite number"),
    (dict(mutation__rate=float("nan")), r"mutation\.rate must be a finite number"),
    (dict(allele1={"name": "one-shot", "breeding": "table", "fecundity": [0.0, float("nan")],
                   "adult_survival": [0.5, 0.5], "juvenile_survival": 0.5}),
     r"allele\[1\]\.fecundity\[1\] must be a finite number; got nan"),
    (dict(sweep={"allele.one-shot.fecundity": [3.0, float("nan")]}),
     r"sweep point 1 \(allele\.one-shot\.fecundity = nan\): allele\[1\]\.fecundity must be a finite"),
]

BOUNDS = [
    (dict(experiment__replicates=2**70), r"experiment\.replicates must be <= 2147483647"),
    (dict(experiment__seed=2**64), r"experiment\.seed must be <= 18446744073709551615"),
    (dict(experiment__max_steps=2**40), r"experiment\.max_steps must be <= 2147483647"),
]


def _refused(changes, message):
    raw = _raw(**changes)
    with pytest.raises(ConfigError, match=message) as err:
        parse_config(raw)
    return err.value


@pytest.mark.parametrize("changes, message", STRICT + NOT_FINITE + BOUNDS)
def test_refused_naming_the_key(changes, message):
    _refused(changes, message)


TABLE = {"name": "one-shot", "breeding": "table", "fecundity": [0.0, 2.0], "adult_survival": [0.5, 0.5],
         "juvenile_survival": 0.5}

# a quoted number or a boolean inside a list by age: once refused with an empty message
# (both branches of the scalar-or-list union were dropped as "the wrong branch")
IN_A_LIST_BY_AGE = [
    (dict(allele1={**TABLE, "fecundity": [0.0, "2"]}),
     r"^allele\[1\]\.fecundity\[1\] must be a number \(written without quotes\); got '2'$"),
    (dict(allele1={**TABLE, "adult_survival": [0.5, "0.5"]}),
     r"^allele\[1\]\.adult_survival\[1\] must be a number \(written without quotes\); got '0\.5'$"),
    (dict(allele1={**TABLE, "fecundity": [0.0, True]}),
     r"^allele\[1\]\.fecundity\[1\] must be a number, not true or false; got True$"),
    (dict(allele0__fecundity=["2.0"]),
     r"^allele\[0\]\.fecundity\[0\] must be a number \(written without quotes\); got '2\.0'$"),
    (dict(allele1={**TABLE, "fecundity": [0.0, [2.0]]}),
     r"^allele\[1\]\.fecundity\[1\] must be a number, not a list; got \[2\.0\]$"),
]


@pytest.mark.parametrize("changes, message", IN_A_LIST_BY_AGE)
def test_a_bad_value_in_a_list_by_age_is_named_with_its_index(changes, message, tmp_path, capsys):
    err = _refused(changes, message)
    assert len(err.problems) == 1
    path = tmp_path / "c.toml"
    path.write_text(raw_toml_text(_raw(**changes)))
    assert main(["check", str(path)]) == 2
    said = capsys.readouterr().err.strip()
    assert re.search(message.removeprefix("^"), said) and said.count("\n") == 0


def test_a_sweep_too_large_to_hold_is_refused_before_it_is_expanded():
    err = _refused(dict(sweep={"allele.one-shot.fecundity": [1.0] * 1000,
                               "density.capacity": [50.0] * 1000}), r"sweep: 1,000,000 points; at most")
    assert len(err.problems) == 1


def test_a_config_that_is_not_text(tmp_path):
    path = tmp_path / "binary.toml"
    path.write_bytes(b"[experiment]\nname = '\xe9t\xe9'\n\x00\xff\xfe")
    with pytest.raises(ConfigError, match=r"binary\.toml: not a text config \(TOML is UTF-8"):
        load_config(path)


def test_a_config_path_that_is_a_folder(tmp_path, capsys):
    with pytest.raises(ConfigError, match=r"is a folder, not a file"):
        load_config(tmp_path)
    assert main(["check", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err


# -- configs valid key by key that cannot start: refused before the run, naming the key ---------
from itertools import islice  # noqa: E402

from sim.describe import preflight  # noqa: E402
from sim.parallel import Batch, iter_batches  # noqa: E402
from sim.replicates import run_replicates  # noqa: E402
from sim.store import ResultsWriter  # noqa: E402
from tests.runs_support import small_config, write_config  # noqa: E402

CANNOT_START = [
    (dict(density__capacity=0.3), r"density\.capacity: the resident 'perennial' starts with no individuals"),
    (dict(density__capacity=1e-300), r"density\.capacity: the resident 'perennial' starts with no"),
    (dict(density__capacity=1e300), r"density\.capacity: the resident's equilibrium census is 1e\+300"),
    (dict(density__form="ricker", density__capacity=1e15), r"density\.capacity: the resident's equilibrium"),
    (dict(invasion__mutant_count=4294967295),
     r"invasion\.mutant_count: the starting census has 4,294,967,345 individuals, more than "
     r"experiment\.max_population = 1,000,000"),
    # a resident of a given count: that count is the key to lower, not density.capacity
    (dict(invasion__resident_count=5_000_000),
     r"^invasion\.resident_count: the starting census has 5,000,001 individuals, more than "
     r"experiment\.max_population = 1,000,000"),
    (dict(density__capacity=500, experiment__max_population=100),
     r"^density\.capacity: the starting census has 501 individuals, more than "
     r"experiment\.max_population = 100"),
    (dict(offspring={"distribution": "negative-binomial", "dispersion": 1e-300}),
     r"offspring\.dispersion must be >= 1e-06; got 1e-300"),
]


@pytest.mark.parametrize("changes, message", CANNOT_START)
def test_refused_before_the_run(changes, message):
    with pytest.raises(ConfigError, match=message):
        preflight(parse_config(_raw(**changes)))


EXPLODING = [
    dict(allele1__fecundity=1e12),
    dict(allele1__fecundity=1e300),
    dict(allele0__fecundity=1e12, density__form="none", density__acts_on=None,
         density__capacity=None, invasion__resident_count=10),
    dict(allele1__fecundity=1e300, offspring={"distribution": "fixed"}),
    dict(allele1__fecundity=1e12, offspring={"distribution": "negative-binomial", "dispersion": 1.0}),
    dict(allele1__fecundity=1e300, experiment__engine="counts"),
    dict(allele1__fecundity=1e12, density__form="ceiling", density__acts_on="recruitment"),
    dict(allele1__fecundity=1e12, density__form="ceiling", experiment__engine="counts"),
]


@pytest.mark.parametrize("changes", EXPLODING)
def test_an_exploding_population_ends_capped_without_sizing_its_arrays(changes):
    # a season overshoots by a factor of the fecundity: the draw is capped (sim.engines.season
    # DRAW_LIMIT) and the replicate stops as capped, its census past max_population
    point = preflight(parse_config(_raw(**changes)))[0]
    results = run_replicates(point, range(4), 3)
    assert all(r.outcome == "capped" for r in results)
    assert all(r.final_census > point.config.experiment.max_population for r in results)
    assert all(r.trajectory.max() <= 2**32 - 1 for r in results)


@pytest.mark.parametrize("changes", [
    dict(allele1__fecundity=1e5, density__form="none", density__acts_on=None,
         density__capacity=None, invasion__resident_count=10),
    dict(allele1__fecundity=1e300, density__form="none", density__acts_on=None,
         density__capacity=None, invasion__resident_count=10),
    dict(allele1__fecundity=1e5, density__form="ceiling", density__acts_on="recruitment"),
])
def test_the_agents_engine_stops_building_an_exploding_population(changes):
    # Issue 11: the Mesa engine looped over every young of a 1e12 brood (a hang) and failed on
    # a 1e300 mean. It now draws means up to the array engines' DRAW_LIMIT and stops drawing
    # young once the census passes max_population (the replicate ends capped, as in the
    # array engines; a replicate that stays below draws exactly as before).
    raw = _raw(experiment__engine="agents", experiment__max_population=3000, **changes)
    point = preflight(parse_config(raw), budget=False)[0]
    results = run_replicates(point, range(3), 3)
    assert all(r.outcome == "capped" for r in results)
    assert all(r.final_census > 3000 for r in results)
    # the young past the cap are counted, not built: the census holds them all (a 1e5 brood
    # of recruitment 0.5 gives some 5e4 recruits a breeder; 1e300 is drawn as DRAW_LIMIT)
    assert all(r.final_census > 40_000 for r in results)


def test_the_agents_engine_refuses_a_brood_it_cannot_draw_young_by_young(tmp_path, capsys):
    # A brood of 1e12 under density dependence would be drawn young by young every season.
    raw = _raw(experiment__engine="agents", allele1__fecundity=1e12)
    with pytest.raises(ConfigError, match=r"allele\[1\]\.fecundity: 'one-shot' breeds 1e\+12 young a season"):
        preflight(parse_config(raw))
    assert preflight(parse_config(raw), budget=False)  # lifted by the budget's flag
    assert preflight(parse_config(_raw(experiment__engine="individual", allele1__fecundity=1e12)))


def test_births_past_the_draw_limit_still_regulate_recruits_when_offspring_are_counted():
    # counted = "offspring": D is the births, so recruits stay near K however large the fecundity
    point = preflight(parse_config(_raw(allele1__fecundity=1e300, density__counted="offspring")))[0]
    results = run_replicates(point, range(4), 3)
    assert all(r.outcome != "capped" and r.final_census < 1000 for r in results)


def test_a_budget_on_individual_seasons_lifted_by_a_flag(tmp_path, capsys):
    path = write_config(tmp_path, replicates=10**9)  # 4 points x 1e9 x 300 seasons x ~20
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert re.search(r"experiment\.replicates: .* individual-seasons .* passes the budget of 1e\+13; "
                     r".* lift the budget with --no-budget", err)
    assert main(["check", str(path), "--no-budget"]) == 0


def test_a_billion_replicates_are_planned_lazily(tmp_path):
    config = small_config(replicates=10**9)
    points = preflight(config, budget=False)
    writer = ResultsWriter(tmp_path / "out.h5", config, points)
    try:
        missing = writer.missing()  # from the shards' spans: no mask over 1e9 replicates
        assert missing == {p: [range(0, 10**9)] for p in range(4)}
        batches = iter_batches(missing, 1024)  # a generator: no million batch objects
        assert list(islice(batches, 2)) == [Batch(0, 0, 1023), Batch(0, 1024, 2047)]
    finally:
        writer.release()


# -- locate's options: refused at the command line, naming the option, before anything runs ------
LOCATE_OPTIONS = [
    (["--tolerance", "nan"], "argument --tolerance: must be a finite number; got nan"),
    (["--tolerance", "inf"], "argument --tolerance: must be a finite number; got inf"),
    (["--tolerance", "0"], "argument --tolerance: must be > 0; got 0"),
    (["--budget", "0"], "argument --budget: must be >= 1; got 0"),
    (["--workers", "0"], "argument --workers: must be >= 1; got 0"),
    (["--workers", "-3"], "argument --workers: must be >= 1; got -3"),
]


@pytest.mark.parametrize("option, message", LOCATE_OPTIONS, ids=[" ".join(o) for o, _ in LOCATE_OPTIONS])
def test_locate_refuses_a_bad_option_naming_it(tmp_path, capsys, option, message):
    config = write_config(tmp_path)
    out = tmp_path / "L.h5"
    with pytest.raises(SystemExit) as stop:
        main(["locate", str(config), "--parameter", "allele.one-shot.fecundity", "-o", str(out), *option])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert err.splitlines()[-1] == f"broodline locate: error: {message}"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["small.toml"]


def test_locate_refuses_each_bad_setting_in_its_own_message(tmp_path):
    from analysis.locate import locate

    config = small_config().model_copy(update={"sweep": None})
    with pytest.raises(ConfigError) as err:
        locate(config, "allele.one-shot.fecundity", tmp_path / "L.h5", tolerance=float("nan"), budget=0,
               workers=-3)
    assert err.value.problems == ["tolerance must be a finite number > 0; got nan",
                                  "budget must be a whole number >= 1; got 0",
                                  "workers must be a whole number >= 1; got -3"]
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("damage", ["empty", "not-hdf5", "truncated"])
def test_locate_resume_of_something_not_a_results_file_is_one_line(tmp_path, capsys, damage):
    config = write_config(tmp_path)
    out = tmp_path / "L.h5"
    data = {"empty": b"", "not-hdf5": b"not a results file\n", "truncated": b"\x89HDF\r\n\x1a\n" + bytes(600)}
    out.write_bytes(data[damage])
    assert main(["locate", str(config), "--parameter", "allele.one-shot.fecundity", "-o", str(out),
                 "--resume", "--workers", "1"]) == 2
    err = capsys.readouterr().err
    assert err.count("error:") == 1 and "Traceback" not in err
    assert f"broodline locate: error: cannot resume {str(out)!r}: " in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["L.h5", "small.toml"]
    assert out.read_bytes() == data[damage]


# -- --cluster aimed at something that is not a dask scheduler: one line, no hang ---------------
import socket  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from http.server import BaseHTTPRequestHandler, HTTPServer  # noqa: E402

from sim.parallel import ClusterError  # noqa: E402
from sim.parallel.cluster import DaskPool  # noqa: E402

pytest.importorskip("distributed")


def test_a_web_server_or_a_silent_socket_is_not_taken_for_a_scheduler():
    web = HTTPServer(("127.0.0.1", 0), BaseHTTPRequestHandler)
    threading.Thread(target=web.serve_forever, daemon=True).start()
    silent = socket.socket()
    silent.bind(("127.0.0.1", 0))
    silent.listen()  # accepts connections (the kernel does) and never says a word
    try:
        for port in (web.server_address[1], silent.getsockname()[1]):
            start = time.monotonic()
            with pytest.raises(ClusterError, match=rf"'tcp://127\.0\.0\.1:{port}' is not a dask scheduler"):
                DaskPool(f"tcp://127.0.0.1:{port}", timeout=1.0)
            assert time.monotonic() - start < 5
    finally:
        web.shutdown()
        silent.close()


@pytest.mark.parametrize("address", ["http://127.0.0.1:8786", "inproc://127.0.0.1/1/1", "ucx://127.0.0.1:8786"])
def test_a_scheme_other_than_tcp_is_one_line(tmp_path, capsys, address):
    config = write_config(tmp_path)
    assert main(["run", str(config), "-o", str(tmp_path / "out.h5"), "--cluster", address]) == 2
    err = capsys.readouterr().err
    assert "broodline reaches a dask scheduler over tcp://" in err and "Traceback" not in err
    assert not (tmp_path / "out.h5").exists()


@pytest.mark.parametrize("option", ["--seeds", "--grid-seeds"])
def test_locate_bench_refuses_a_count_below_one_before_running(option, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["locate-bench", option, "0"])
    assert stop.value.code == 2 and f"{option}: must be >= 1; got 0" in capsys.readouterr().err

"""How responsive the lab is: ``python -m analysis.lab.bench [--no-browser]``.

Measures, on the demo's invasion (mutant fecundity 4.5, an invader):

- a season of a K = 1000 population: the session's step and its JSON view,
  and (with Playwright and chromium) the click-to-drawn time in the page;
- 200 replicates at K = 200, from the click to the last tally;
- while they run, how long the page waits for an answer (the page stays
  usable: the simulation runs in the session's worker thread).

Each line gives the time and its ratio to the target (below 1 meets it).
Timings, not assertions: they belong here, not in the test suite.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import threading
import time
import urllib.request

from ..jsonable import jsonable

TARGETS = {"season": 0.100, "replicates": 10.0}
# in the page: press "one season", wait until the answer is drawn; milliseconds
_CLICK_TO_DRAWN = """async () => {
  const before = window.labDraws, start = performance.now();
  document.querySelector('#btn-season').click();
  while (window.labDraws === before) await new Promise((r) => setTimeout(r, 1));
  return window.labDrawnAt - start;
}"""


def _session(capacity: int, replicates: int):
    from sim.config import demo_config_path, load_config

    from .session import LabSession

    s = LabSession(load_config(demo_config_path()))
    problems = s.update({"density.capacity": str(capacity), "mutant.fecundity": "4.5",
                         "experiment.replicates": str(replicates)})
    assert not problems, problems
    return s


def _line(what: str, seconds: float, target: float) -> str:
    return f"{what:<58} {seconds * 1000:9.1f} ms   {seconds / target:6.3f} of the target ({target * 1000:.0f} ms)"


def measure_session() -> list[str]:
    s = _session(1000, 200)
    s.step_season()  # opens replicate 0 (and compiles the engine's pass)
    times = []
    for _ in range(50):
        t = time.perf_counter()
        s.step_season()
        json.dumps(jsonable(s.view(len(s.lines), s.generation)))
        times.append(time.perf_counter() - t)
    out = [_line("season at K = 1000 (step + view), median of 50", statistics.median(times), TARGETS["season"])]
    s = _session(200, 200)
    t = time.perf_counter()
    s.run_many(200)
    s.wait()
    out.append(_line("200 replicates at K = 200 (session)", time.perf_counter() - t, TARGETS["replicates"]))
    return out


def measure_page() -> list[str]:
    from playwright.sync_api import sync_playwright

    from .server import LabServer

    chromium = shutil.which("chromium")
    if chromium is None:
        return ["page: skipped (no chromium)"]
    args = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync"]
    out = []
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=chromium, args=args)
        for capacity in (1000, 200):
            server = LabServer(_session(capacity, 200)).start()
            page = browser.new_page(viewport={"width": 1300, "height": 900})
            page.goto(server.url)
            page.wait_for_selector("#th-fitness")
            if capacity == 1000:
                page.click("#btn-season")
                page.wait_for_function("document.querySelector('#census-title').textContent.includes('season 0')")
                times = [page.evaluate(_CLICK_TO_DRAWN) / 1000 for _ in range(20)]
                out.append(_line("season at K = 1000, click to drawn in the page, median of 20",
                                 statistics.median(times), TARGETS["season"]))
            else:
                waits, running = [], threading.Event()

                def probe(running=running, server=server, waits=waits):  # a user's request meanwhile
                    running.wait()
                    while running.is_set():
                        t = time.perf_counter()
                        urllib.request.urlopen(server.url + "api/view?since=100000&generation=0").read()
                        waits.append(time.perf_counter() - t)
                        time.sleep(0.05)

                prober = threading.Thread(target=probe)
                prober.start()
                t = time.perf_counter()
                page.click("#btn-replicates")
                running.set()
                page.wait_for_function("document.querySelector('#status').dataset.running === 'false' && "
                                       "+document.querySelector('#tally-n').textContent === 200", timeout=120000)
                out.append(_line("200 replicates at K = 200, click to final tally in the page",
                                 time.perf_counter() - t, TARGETS["replicates"]))
                running.clear()
                prober.join()
                if waits:
                    answered = f"  answers to the page while they ran (n = {len(waits)})"
                    out.append(f"{answered:<58} "
                               f"median {statistics.median(waits) * 1000:.1f} ms, longest {max(waits) * 1000:.1f} ms")
            page.close()
            server.close()
        browser.close()
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m analysis.lab.bench", description=__doc__.splitlines()[0])
    parser.add_argument("--no-browser", action="store_true", help="session timings only")
    args = parser.parse_args(argv)
    for line in measure_session():
        print(line, flush=True)
    if not args.no_browser:
        try:
            lines = measure_page()
        except ImportError:
            lines = ["page: skipped (needs Playwright: pip install '.[test]')"]
        for line in lines:
            print(line, flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

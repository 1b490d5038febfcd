"""`olibra bench load`: cheap reads alone, then under a mixed load of concurrent shape searches and a
scorecard, against a real `olibra serve` (waitress) in a subprocess on 127.0.0.1; then the sign-in
throttle under a burst of wrong passwords.

Prints the median and 95th percentile of the cheap requests alone and under the mix (target: p95
under the mix at most 2x alone), what the heavy clients got (200, or 503 when the heavy pool was full),
and how many sign-in attempts per account and address the throttle let through in the burst.

The catalogue is the seed catalogue with computed shape and vibration (MMFF94) records, built once in
$OLIBRA_CACHE/bench-load (or `--db URL`).
"""

from __future__ import annotations

import os
import random
import secrets
import statistics
import sys
import threading
import time
import urllib.parse
from pathlib import Path

from benchmarks.web import _Client, _free_port, _percentile, _start_server
from library.seed_catalog import MATERIALS_FILE

BENCH_USER = "bench-load"
SEED_FILE = MATERIALS_FILE


def default_folder() -> Path:
    from library import user_cache

    return user_cache.folder() / "bench-load"


def build_catalogue(out=sys.stdout) -> str:
    """The seed catalogue with current records (built once, reused)."""
    from library import computations
    from library.catalogue import curation, jobs, transfer
    from library.catalogue.database import Catalogue, initialize

    folder = default_folder()
    path = folder / "catalogue.sqlite"
    url = f"sqlite:///{path}"
    if path.exists():
        return url
    folder.mkdir(parents=True, exist_ok=True)
    building = folder / "building.sqlite"
    building.unlink(missing_ok=True)
    catalogue = initialize(f"sqlite:///{building}")
    with catalogue.transaction() as session:
        curation.load_vocabulary(session)
    report = transfer.import_into(catalogue, transfer.read_rows(SEED_FILE), keep_good=True)
    print(f"bench catalogue: {report.summary()}; computing records...", file=out, flush=True)
    plan = computations.Plan()
    stamps = computations.stamps(plan)
    job = jobs.run(catalogue, stamps, computations.worker(plan), jobs.select_materials(catalogue, stamps))
    print(f"bench catalogue: {job.summary()}", file=out, flush=True)
    catalogue.dispose()
    building.rename(path)
    Catalogue(url).dispose()
    return url


def _loop(port: int, password: str, paths, stop: threading.Event, record) -> None:
    client = _Client(port, BENCH_USER, password)
    try:
        while not stop.is_set():
            path = paths()
            started = time.perf_counter()
            status, _ = client.request("GET", path)
            record(path, status, time.perf_counter() - started)
    finally:
        client.close()


def _cheap_phase(port, password, cheap_paths, clients: int, requests: int) -> tuple[list[float], int]:
    queue = list(cheap_paths)[:requests]
    lock = threading.Lock()
    latencies: list[float] = []
    failures = [0]

    def work():
        client = _Client(port, BENCH_USER, password)
        while True:
            with lock:
                if not queue:
                    break
                path = queue.pop()
            started = time.perf_counter()
            status, _ = client.request("GET", path)
            with lock:
                latencies.append(time.perf_counter() - started)
                failures[0] += status != 200
        client.close()
    threads = [threading.Thread(target=work) for _ in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return latencies, failures[0]


def _sign_in_burst(port: int, seconds: float, clients: int, password: str, out) -> dict:
    """`clients` clients send wrong passwords for one account for `seconds`; then the right one."""
    import http.client
    import json

    counts = {"401": 0, "429": 0, "other": 0}
    lock = threading.Lock()
    deadline = time.monotonic() + seconds

    def attempt(connection, cookie, token, secret):
        connection.request("POST", "/api/session", body=json.dumps({"username": BENCH_USER, "password": secret}),
                           headers={"Content-Type": "application/json", "X-CSRF-Token": token, "Cookie": cookie})
        response = connection.getresponse()
        response.read()
        return response.status

    def open_client():
        connection = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
        connection.request("GET", "/api/session")
        response = connection.getresponse()
        token = json.loads(response.read())["csrf_token"]
        return connection, response.getheader("Set-Cookie").split(";", 1)[0], token

    def work():
        connection, cookie, token = open_client()
        while time.monotonic() < deadline:
            status = attempt(connection, cookie, token, "wrong password " + secrets.token_hex(4))
            with lock:
                counts[str(status) if str(status) in counts else "other"] += 1
            if status == 429:
                time.sleep(0.05)
        connection.close()
    threads = [threading.Thread(target=work) for _ in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    connection, cookie, token = open_client()
    right = attempt(connection, cookie, token, password)
    connection.close()
    print(f"sign-in throttle: {clients} clients sent wrong passwords for {BENCH_USER!r} from 127.0.0.1 for "
          f"{seconds:g} s: {counts['401']} attempts were checked (401), {counts['429']} were refused unchecked "
          f"(429 with Retry-After), {counts['other']} other; then the right password got {right}", file=out, flush=True)
    return {**counts, "right_password_status": right}


def run(catalogue_url: str | None = None, *, cheap_clients: int = 4, shape_clients: int = 4, requests: int = 600,
        threads: int = 8, sign_in_seconds: float = 60.0, seed: int = 0, out=sys.stdout) -> dict:
    from sqlalchemy import select

    from library.catalogue import accounts
    from library.catalogue.database import Catalogue
    from library.catalogue.models import Material

    url = catalogue_url or build_catalogue(out=out)
    catalogue = Catalogue(url)
    password = secrets.token_urlsafe(16)
    try:
        with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
            if accounts.find_user(session, BENCH_USER) is None:
                accounts.create_user(session, BENCH_USER, password, "reader", actor="olibra bench load")
            else:
                accounts.set_password(session, BENCH_USER, password, actor="olibra bench load")
        with catalogue.reading() as session:
            materials = session.execute(select(Material.id, Material.preferred_name)
                                        .where(Material.status == "active")).all()
    finally:
        catalogue.dispose()
    rng = random.Random(seed)
    names = [name for _, name in materials]
    ids = [i for i, _ in materials]

    def cheap_path():
        kind = rng.randrange(4)
        if kind == 0:
            return "/api/materials?" + urllib.parse.urlencode({"q": rng.choice(names)[:4]})
        if kind == 1:
            return f"/api/materials/{rng.choice(ids)}"
        if kind == 2:
            return "/api/suggest?" + urllib.parse.urlencode({"q": rng.choice(names)[:3]})
        return f"/materials/{rng.choice(ids)}"

    def shape_path():
        return "/api/substitutes?" + urllib.parse.urlencode({"material": rng.choice(names), "metric": "shape",
                                                             "k": 10})
    scorecard_k = iter(range(1, 10**6))

    def scorecard_path():  # a new k each time: never answered from the cache
        return f"/api/scorecard?permutations=999&resamples=1000&k={next(scorecard_k) % 50 + 1}"

    port = _free_port()
    server = _start_server(url, port, threads)
    figures: dict = {"materials": len(ids), "threads": threads}
    print(f"catalogue {url}: {len(ids)} active materials; waitress with {threads} threads, {os.cpu_count()} "
          f"core(s); cheap requests: material search, material JSON, type-ahead, material page", file=out, flush=True)
    try:
        warm = _Client(port, BENCH_USER, password)
        warm.request("GET", shape_path())  # builds the index once, not counted
        warm.close()
        alone, failed = _cheap_phase(port, password, [cheap_path() for _ in range(requests)], cheap_clients,
                                     requests)
        figures["alone"] = {"median_ms": statistics.median(alone) * 1000, "p95_ms": _percentile(alone, 0.95) * 1000,
                            "failures": failed}
        print(f"  cheap reads alone ({cheap_clients} clients, {len(alone)} requests): median "
              f"{figures['alone']['median_ms']:.1f} ms, 95th percentile {figures['alone']['p95_ms']:.1f} ms"
              + (f", {failed} not 200" if failed else ""), file=out, flush=True)
        stop = threading.Event()
        heavy: dict[str, dict[int, int]] = {"shape search": {}, "scorecard": {}}
        heavy_ms: dict[str, list[float]] = {"shape search": [], "scorecard": []}
        lock = threading.Lock()

        def recorder(kind):
            def record(_path, status, elapsed):
                with lock:
                    heavy[kind][status] = heavy[kind].get(status, 0) + 1
                    if status == 200:
                        heavy_ms[kind].append(elapsed * 1000)
                if status == 503:
                    time.sleep(0.5)
            return record
        loops = [threading.Thread(target=_loop, args=(port, password, shape_path, stop, recorder("shape search")))
                 for _ in range(shape_clients)]
        loops.append(threading.Thread(target=_loop, args=(port, password, scorecard_path, stop,
                                                          recorder("scorecard"))))
        for t in loops:
            t.start()
        time.sleep(2.0)  # let the heavy load build up
        mixed, failed = _cheap_phase(port, password, [cheap_path() for _ in range(requests)], cheap_clients,
                                     requests)
        stop.set()
        for t in loops:
            t.join()
        figures["mixed"] = {"median_ms": statistics.median(mixed) * 1000, "p95_ms": _percentile(mixed, 0.95) * 1000,
                            "failures": failed}
        ratio = figures["mixed"]["p95_ms"] / figures["alone"]["p95_ms"]
        figures["p95_ratio"] = ratio
        figures["heavy"] = heavy
        print(f"  cheap reads under {shape_clients} shape-search clients and 1 scorecard client: median "
              f"{figures['mixed']['median_ms']:.1f} ms, 95th percentile {figures['mixed']['p95_ms']:.1f} ms "
              f"({ratio:.2f}x alone; target at most 2x)" + (f", {failed} not 200" if failed else ""),
              file=out, flush=True)
        for kind, statuses in heavy.items():
            done = heavy_ms[kind]
            print(f"  {kind}: " + ", ".join(f"{n} x {status}" for status, n in sorted(statuses.items()))
                  + (f"; median {statistics.median(done):.0f} ms when answered" if done else ""), file=out, flush=True)
        if sign_in_seconds > 0:
            figures["sign_in"] = _sign_in_burst(port, sign_in_seconds, cheap_clients, password, out)
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except Exception:
            server.kill()
    return figures

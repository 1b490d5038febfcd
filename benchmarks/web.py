"""`olibra bench web`: response times of the substitutes and disagreements pages (and their JSON API)
under concurrent clients, against a real waitress server in a subprocess on 127.0.0.1.

The catalogue is the seed catalogue plus real, simple aroma chemicals enumerated
with RDKit (esters from lists of acids and alcohols, straight-chain and
2-methyl aldehydes with their nitriles and alcohols, methyl ketones), about
1,000 materials with real computed shape and vibration (MMFF94) records. It is
built once in a folder and reused by later runs.

    from benchmarks import web as bench
    figures = bench.run(None, clients=8, requests=400)
"""

from __future__ import annotations

import csv
import http.client
import json
import os
import random
import secrets
import socket
import statistics
import subprocess
import sys
import threading
import time
import urllib.parse
from pathlib import Path

from rdkit import Chem

BENCH_USER = "bench-reader"
TARGET_MATERIALS = 1000

# (name stem, SMILES of the acid with the OH written last as "O"): acyl part for esters.
ACIDS = [
    ("formate", "O=C"), ("acetate", "CC(=O)"), ("propionate", "CCC(=O)"), ("butyrate", "CCCC(=O)"),
    ("isobutyrate", "CC(C)C(=O)"), ("valerate", "CCCCC(=O)"), ("isovalerate", "CC(C)CC(=O)"),
    ("2-methylbutyrate", "CCC(C)C(=O)"), ("hexanoate", "CCCCCC(=O)"), ("heptanoate", "CCCCCCC(=O)"),
    ("octanoate", "CCCCCCCC(=O)"), ("tiglate", "C/C=C(\\C)C(=O)"), ("crotonate", "C/C=C/C(=O)"),
    ("benzoate", "c1ccccc1C(=O)"), ("phenylacetate", "c1ccccc1CC(=O)"), ("salicylate", "Oc1ccccc1C(=O)"),
    ("cinnamate", "c1ccccc1/C=C/C(=O)"), ("lactate", "CC(O)C(=O)"), ("pivalate", "CC(C)(C)C(=O)"),
    ("3-methylcrotonate", "CC(C)=CC(=O)"), ("anthranilate", "Nc1ccccc1C(=O)"),
    ("cyclohexanecarboxylate", "C1CCCCC1C(=O)"), ("furoate", "o1cccc1C(=O)"), ("decanoate", "CCCCCCCCCC(=O)"),
]
# (name, SMILES fragment of the alkoxy part, attached through its first atom to the ester oxygen).
ALCOHOLS = [
    ("Methyl", "C"), ("Ethyl", "CC"), ("Propyl", "CCC"), ("Isopropyl", "C(C)C"), ("Butyl", "CCCC"),
    ("Isobutyl", "CC(C)C"), ("sec-Butyl", "C(C)CC"), ("Pentyl", "CCCCC"), ("Isoamyl", "CCC(C)C"),
    ("Hexyl", "CCCCCC"), ("Heptyl", "CCCCCCC"), ("Octyl", "CCCCCCCC"), ("Benzyl", "Cc1ccccc1"),
    ("2-Phenylethyl", "CCc1ccccc1"), ("Allyl", "CC=C"), ("(Z)-3-Hexenyl", "CC/C=C\\CC"), ("Prenyl", "CC=C(C)C"),
    ("Cyclohexyl", "C1CCCCC1"), ("Citronellyl", "CCC(C)CCC=C(C)C"), ("Geranyl", "C/C=C(\\C)CCC=C(C)C"),
    ("Furfuryl", "Cc1ccco1"), ("Anisyl", "Cc1ccc(OC)cc1"), ("Cinnamyl", "C/C=C/c1ccccc1"),
    ("Nonyl", "CCCCCCCCC"), ("Decyl", "CCCCCCCCCC"), ("Menthyl", "[C@@H]1C[C@H](C)CC[C@H]1C(C)C"),
    ("Phenoxyethyl", "CCOc1ccccc1"), ("Tetrahydrofurfuryl", "CC1CCCO1"), ("2-Ethylhexyl", "CC(CC)CCCC"),
    ("Isobornyl", "C1CC2CCC1(C)C2(C)C"), ("Linalyl", "C(C)(C=C)CCC=C(C)C"), ("Neryl", "C/C=C(/C)CCC=C(C)C"),
    ("Terpinyl", "C(C)(C)C1CC=C(C)CC1"),
]
FAMILY_ODORS = {
    "ester": "fruity:0.7|sweet:0.4", "aromatic ester": "floral:0.5|sweet:0.5|balsamic:0.3",
    "aldehyde": "aldehydic:0.8|waxy:0.5|fatty:0.3", "nitrile": "aldehydic:0.5|waxy:0.4|metallic:0.3",
    "alcohol": "waxy:0.4|floral:0.3|fresh:0.3", "ketone": "fruity:0.4|fatty:0.3|green:0.3",
}
CHAIN = {5: "Pent", 6: "Hex", 7: "Hept", 8: "Oct", 9: "Non", 10: "Dec", 11: "Undec", 12: "Dodec", 13: "Tridec",
         14: "Tetradec", 15: "Pentadec", 16: "Hexadec"}


def enumerated_materials() -> list[tuple[str, str, str]]:
    """(name, canonical SMILES, odor text) of simple real aroma chemicals built from the lists above."""
    out: dict[str, tuple[str, str, str]] = {}

    def add(name: str, smiles: str, odors: str) -> None:
        mol = Chem.MolFromSmiles(smiles)
        if mol is None:
            raise ValueError(f"enumerated structure {name} ({smiles}) does not parse: a bug in webui/bench.py")
        out.setdefault(Chem.MolToSmiles(mol), (name, Chem.MolToSmiles(mol), odors))

    for n, stem in CHAIN.items():
        chain = "C" * (n - 1)
        add(f"{stem}anal", f"{chain}C=O", FAMILY_ODORS["aldehyde"])
        add(f"2-Methyl{stem.lower()}anal", f"{'C' * (n - 2)}C(C)C=O", FAMILY_ODORS["aldehyde"])
        add(f"{stem}anenitrile", f"{chain}C#N", FAMILY_ODORS["nitrile"])
        add(f"{stem}an-1-ol", f"{chain}CO", FAMILY_ODORS["alcohol"])
        add(f"{stem}an-2-one", f"{'C' * (n - 2)}C(C)=O", FAMILY_ODORS["ketone"])
        add(f"(E)-2-{stem}enal", f"{'C' * (n - 3)}/C=C/C=O", FAMILY_ODORS["aldehyde"])
    for acid_name, acyl in ACIDS:
        aromatic = "c" in acyl
        for alcohol_name, alkyl in ALCOHOLS:
            family = "aromatic ester" if aromatic or "c" in alkyl else "ester"
            add(f"{alcohol_name} {acid_name}", f"{acyl}O{alkyl}", FAMILY_ODORS[family])
    return list(out.values())


def default_folder() -> Path:
    from library import user_cache

    return user_cache.folder() / "bench-web"


def build_catalogue(folder: Path | None = None, *, target: int = TARGET_MATERIALS, processes: int | None = None,
                    out=sys.stdout) -> str:
    """A catalogue of about `target` materials with current records in `folder` (reused when present)."""
    from library import computations
    from library.catalogue import accounts, curation, jobs, transfer
    from library.catalogue.database import initialize
    from library.catalogue.seed import load_seed

    folder = Path(folder or default_folder())
    folder.mkdir(parents=True, exist_ok=True)
    url = f"sqlite:///{folder / 'catalogue.sqlite'}"
    catalogue = initialize(url)
    try:
        with catalogue.transaction() as session:
            curation.load_vocabulary(session)
        load_seed(catalogue)
        with catalogue.reading() as session:
            from sqlalchemy import func, select

            from library.catalogue.models import Material
            present = session.scalar(select(func.count()).select_from(Material)) or 0
        if present < target:
            extra = enumerated_materials()[: max(0, target - present) + 40]  # some are seed structures already
            path = folder / "enumerated.csv"
            with path.open("w", newline="", encoding="utf-8") as handle:
                writer = csv.writer(handle)
                writer.writerow(["name", "smiles", "odor", "structure_source", "odor_source"])
                for name, smiles, odors in extra:
                    writer.writerow([name, smiles, odors, "demo", "demo"])
            with catalogue.sessions() as session:
                with session.begin() as outer:
                    report = transfer.import_rows(session, transfer.read_rows(path), keep_good=True,
                                                  actor="olibra bench web")
                    if not report.committed:
                        outer.rollback()
            print(f"catalogue: {report.count('added')} enumerated material(s) added, "
                  f"{report.count('present')} already present, {report.count('rejected')} rejected", file=out)
        plan = computations.Plan(kinds=computations.KINDS, vibration_engine="mmff")
        stamps = computations.stamps(plan)
        todo = jobs.select_materials(catalogue, stamps, which="stale")
        if todo:
            print(f"computing shape and vibration records for {len(todo)} material(s) "
                  f"on {processes or os.cpu_count()} process(es) ...", file=out, flush=True)
            started = time.perf_counter()
            job = jobs.run(catalogue, stamps, computations.worker(plan), todo, processes=processes)
            print(f"computed {job.done} material(s) in {time.perf_counter() - started:.1f} s "
                  f"({len(job.failures)} failed)", file=out, flush=True)
        with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
            if accounts.find_user(session, BENCH_USER) is None:
                accounts.create_user(session, BENCH_USER, secrets.token_urlsafe(16), "reader",
                                     actor="olibra bench web")
    finally:
        catalogue.dispose()
    return url


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


class _Client:
    """One signed-in HTTP client on a keep-alive connection (http.client; the session cookie by hand)."""

    def __init__(self, port: int, username: str, password: str):
        self.port = port
        self.connection = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
        self.cookie = ""
        token = self.request("GET", "/api/session")[1]["csrf_token"]
        status, body = self.request("POST", "/api/session", {"username": username, "password": password},
                                    headers={"X-CSRF-Token": token})
        if status != 200:
            raise RuntimeError(f"bench client could not sign in: {status} {body}")

    def request(self, method: str, path: str, body=None, headers=None):
        headers = dict(headers or {})
        if self.cookie:
            headers["Cookie"] = self.cookie
        data = None
        if body is not None:
            data = json.dumps(body).encode()
            headers["Content-Type"] = "application/json"
        self.connection.request(method, path, body=data, headers=headers)
        response = self.connection.getresponse()
        payload = response.read()
        cookie = response.getheader("Set-Cookie")
        if cookie:
            self.cookie = cookie.split(";", 1)[0]
        if response.getheader("Content-Type", "").startswith("application/json"):
            return response.status, json.loads(payload)
        return response.status, payload

    def close(self) -> None:
        self.connection.close()


def _start_server(url: str, port: int, threads: int) -> subprocess.Popen:
    env = dict(os.environ, OLIBRA_SECRET_KEY=secrets.token_hex(32))
    process = subprocess.Popen([sys.executable, "-m", "library.cli", "--db", url, "serve", "--host", "127.0.0.1",
                                "--port", str(port), "--threads", str(threads)],
                               env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"the server stopped: {process.stderr.read().decode(errors='replace')[-2000:]}")
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=1):
                return process
        except OSError:
            time.sleep(0.2)
    process.terminate()
    raise RuntimeError("the server did not answer within 60 s")


def _percentile(values: list[float], fraction: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, max(0, int(round(fraction * (len(ordered) - 1)))))]


def _measure(port, username, password, paths: list[str], clients: int) -> tuple[list[float], int]:
    """Send `paths` from `clients` concurrent signed-in clients; (latencies in s, failures)."""
    queue = list(paths)
    lock = threading.Lock()
    latencies: list[float] = []
    failures = [0]
    sessions = [_Client(port, username, password) for _ in range(clients)]

    def work(client: _Client) -> None:
        while True:
            with lock:
                if not queue:
                    return
                path = queue.pop()
            started = time.perf_counter()
            status, _ = client.request("GET", path)
            elapsed = time.perf_counter() - started
            with lock:
                latencies.append(elapsed)
                if status != 200:
                    failures[0] += 1

    workers = [threading.Thread(target=work, args=(s,)) for s in sessions]
    for w in workers:
        w.start()
    for w in workers:
        w.join()
    for s in sessions:
        s.close()
    return latencies, failures[0]


def run(catalogue_url: str | None = None, *, clients: int = 8, requests: int = 400, threads: int = 8,
        seed: int = 0, out=sys.stdout) -> dict:
    """Median and 95th-percentile response times (ms) of the substitutes and disagreements pages and their
    JSON API under `clients` concurrent clients, against `olibra serve` (waitress, `threads` request
    threads) in a subprocess on 127.0.0.1. Without `catalogue_url`, builds or reuses the ~1,000-material
    bench catalogue (see `build_catalogue`). Returns the figures; prints them to `out`."""
    from sqlalchemy import select

    from library.catalogue import accounts
    from library.catalogue.database import Catalogue
    from library.catalogue.models import Material

    started = time.perf_counter()
    url = catalogue_url or build_catalogue(out=out)
    catalogue = Catalogue(url)
    password = secrets.token_urlsafe(16)
    try:
        with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
            if accounts.find_user(session, BENCH_USER) is None:
                accounts.create_user(session, BENCH_USER, password, "reader", actor="olibra bench web")
            else:
                accounts.set_password(session, BENCH_USER, password, actor="olibra bench web")
        with catalogue.reading() as session:
            names = list(session.scalars(select(Material.preferred_name).where(Material.status == "active")))
    finally:
        catalogue.dispose()
    print(f"catalogue {url}: {len(names)} active materials (ready in {time.perf_counter() - started:.1f} s)",
          file=out, flush=True)
    rng = random.Random(seed)
    port = _free_port()
    server = _start_server(url, port, threads)
    figures: dict = {"materials": len(names), "clients": clients, "threads": threads, "requests": requests}
    try:
        warm = _Client(port, BENCH_USER, password)
        for label, path in (("index load and first substitutes page", "/substitutes?material=Citral"),
                            ("first disagreements page (computes the pair list)", "/disagreements")):
            t0 = time.perf_counter()
            status, _ = warm.request("GET", path)
            cold = time.perf_counter() - t0
            figures[f"cold {path.split('?')[0]} ms"] = cold * 1000
            print(f"{label}: {cold * 1000:.0f} ms (status {status}, not counted below)", file=out, flush=True)
        warm.close()
        sorts = ["rank", "gap", "shape", "vibration", "observed", "a"]

        def substitutes(prefix):
            return [f"{prefix}?" + urllib.parse.urlencode({"material": rng.choice(names), "metric": "blend",
                                                           "k": 10}) for _ in range(requests)]
        scenarios = {
            "substitutes page": substitutes("/substitutes"),
            "substitutes API": substitutes("/api/substitutes"),
            "disagreements page": [f"/disagreements?sort={rng.choice(sorts)}&order={rng.choice(['asc', 'desc'])}"
                                   f"&page={rng.randint(1, 3)}" for _ in range(requests)],
            "disagreements API": [f"/api/disagreements?sort={rng.choice(sorts)}&page={rng.randint(1, 3)}"
                                  f"&per_page=50" for _ in range(requests)],
        }
        print(f"{clients} concurrent clients, {requests} requests per scenario, waitress with {threads} threads, "
              f"{os.cpu_count()} core(s):", file=out)
        for name, paths in scenarios.items():
            t0 = time.perf_counter()
            latencies, failures = _measure(port, BENCH_USER, password, paths, clients)
            wall = time.perf_counter() - t0
            median, p95 = statistics.median(latencies) * 1000, _percentile(latencies, 0.95) * 1000
            figures[name] = {"median_ms": median, "p95_ms": p95, "max_ms": max(latencies) * 1000,
                             "requests_per_s": len(latencies) / wall, "failures": failures}
            print(f"  {name:<20} median {median:6.1f} ms   95th percentile {p95:6.1f} ms   "
                  f"max {max(latencies) * 1000:6.1f} ms   {len(latencies) / wall:6.1f} requests/s"
                  + (f"   {failures} failed" if failures else ""), file=out, flush=True)
    finally:
        server.terminate()
        try:
            server.wait(timeout=20)
        except subprocess.TimeoutExpired:
            server.kill()
    return figures


if __name__ == "__main__":
    run(sys.argv[1] if len(sys.argv) > 1 else None)

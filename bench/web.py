"""Page latency of the web server under load, and how it grows with the study's size.

For an invented study of 100 and one of 1,000 recordings (three sites each, written by
``manage.py bulk_study`` into a PostgreSQL database of their own), the portal runs under
gunicorn with 2 workers. Signed in as the study lead, N client threads (keep-alive
connections) ask in turn for the study overview, a site page and a recording's quality page
for a fixed time. Printed: p50/p95 latency per page at 10 clients, the throughput at 20
clients, and the 1,000-recording figures as a ratio to the 100-recording ones measured in
the same run (the reference).

    .venv/bin/python bench/web.py [--seconds 30] [--database-url postgres://...]

Needs the PostgreSQL server the test suite uses; writes nothing outside its own databases,
which it makes and drops: CAIRN_BENCH_WEB_DATABASES names them (two names, comma-separated,
for the 100- and the 1,000-recording study), else <database of --database-url>_web_100 and
_web_1000, so two people on one server do not drop each other's.
"""

import argparse
import http.client
import json
import os
import re
import signal
import socket
import statistics
import subprocess
import sys
import threading
import time
import urllib.parse
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SIZES = (100, 1000)


def free_port():
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def recreate(base, name):
    import psycopg

    with psycopg.connect(f"{base}/postgres", autocommit=True) as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        conn.execute(f'CREATE DATABASE "{name}"')


def drop(base, name):
    import psycopg

    with psycopg.connect(f"{base}/postgres", autocommit=True) as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def manage(env, *args):
    done = subprocess.run([sys.executable, "manage.py", *args], cwd=REPO, env=env,
                          capture_output=True, text=True)
    if done.returncode != 0:
        raise SystemExit(f"manage.py {' '.join(args)} failed:\n{done.stdout}\n{done.stderr}")
    return done.stdout


class Client:
    """One keep-alive connection with the session cookie."""

    def __init__(self, port, cookie=""):
        self.port = port
        self.cookie = cookie
        self.conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)

    def request(self, method, path, body=None, headers=None):
        headers = dict(headers or {})
        if self.cookie:
            headers["Cookie"] = self.cookie
        for attempt in range(2):
            try:
                self.conn.request(method, path, body=body, headers=headers)
                reply = self.conn.getresponse()
                data = reply.read()
                return reply, data
            except (http.client.HTTPException, ConnectionError):
                self.conn.close()
                self.conn = http.client.HTTPConnection("127.0.0.1", self.port, timeout=60)
                if attempt:
                    raise
        raise AssertionError("unreachable")


def sign_in(port, username, password):
    client = Client(port)
    reply, body = client.request("GET", "/account/login/")
    csrf = re.search(r"csrftoken=([^;]+)", reply.getheader("Set-Cookie", "")).group(1)
    form = urllib.parse.urlencode({"username": username, "password": password,
                                   "csrfmiddlewaretoken": csrf, "next": "/"})
    client.cookie = f"csrftoken={csrf}"
    reply, _ = client.request("POST", "/account/login/", body=form, headers={
        "Content-Type": "application/x-www-form-urlencoded"})
    cookies = reply.getheader("Set-Cookie", "")
    session = re.search(r"sessionid=([^;]+)", cookies)
    if reply.status != 302 or session is None:
        raise SystemExit(f"could not sign in as {username} (HTTP {reply.status})")
    return f"csrftoken={csrf}; sessionid={session.group(1)}"


def pages(port, cookie, slug):
    """The three page addresses, read off the overview and the site page as a user would."""
    client = Client(port, cookie)
    _, overview = client.request("GET", f"/studies/{slug}/")
    site = re.search(rb'href="(/sites/[^/"]+/)"', overview).group(1).decode()
    _, site_page = client.request("GET", site)
    recording = re.search(rb'href="(/quality/rounds/\d+/recordings/\d+/)"', site_page)
    if recording is None:  # every recording passed: open the round's list instead
        round_url = re.search(rb'href="(/quality/rounds/\d+/)"', overview).group(1).decode()
        _, listing = client.request("GET", round_url)
        recording = re.search(rb'href="(/quality/rounds/\d+/recordings/\d+/)"', listing)
    return {"overview": f"/studies/{slug}/", "site page": site,
            "quality page": recording.group(1).decode()}


def load(port, cookie, urls, *, clients, seconds):
    """Latencies (s) per page and requests per second over all pages."""
    latencies = {name: [] for name in urls}
    errors = []
    stop = time.monotonic() + seconds
    names = list(urls)

    def work(offset):
        client = Client(port, cookie)
        i = offset
        while time.monotonic() < stop:
            name = names[i % len(names)]
            started = time.perf_counter()
            reply, _ = client.request("GET", urls[name])
            took = time.perf_counter() - started
            if reply.status != 200:
                errors.append((name, reply.status))
            latencies[name].append(took)
            i += 1

    threads = [threading.Thread(target=work, args=(k,)) for k in range(clients)]
    began = time.monotonic()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    elapsed = time.monotonic() - began
    if errors:
        raise SystemExit(f"{len(errors)} failed requests, e.g. {errors[:3]}")
    total = sum(len(v) for v in latencies.values())
    return latencies, total / elapsed


def quantile(values, q):
    return statistics.quantiles(values, n=100, method="inclusive")[q - 1]


def database_names(database_url):
    """{size: database name} of the databases this run makes and drops."""
    own = database_url.rpartition("/")[2].partition("?")[0]
    given = os.environ.get("CAIRN_BENCH_WEB_DATABASES", "").strip()
    names = ([n.strip() for n in given.split(",")] if given else
             [f"{own}_web_{size}" for size in SIZES])
    if len(names) != len(SIZES) or len(set(names)) != len(SIZES) or not all(
            re.fullmatch(r"[a-z_][a-z0-9_]{0,62}", n) for n in names):
        raise SystemExit(f"CAIRN_BENCH_WEB_DATABASES must name {len(SIZES)} different databases "
                         f"(lower-case letters, digits, _), comma-separated; got {given!r}")
    if own in names:
        raise SystemExit(f"the bench drops its databases: {own} (of --database-url) must not "
                         "be one of them")
    return dict(zip(SIZES, names, strict=True))


def measure(size, args, base, name):
    recreate(base, name)
    env = dict(os.environ, DATABASE_URL=f"{base}/{name}", CAIRN_HTTPS="0", DEBUG="0",
               CAIRN_VAR_DIR=str(REPO / "var" / "bench-web" / str(size)))
    env.pop("CELERY_BROKER_URL", None)
    server = None
    try:
        manage(env, "migrate", "--noinput")
        made = json.loads(manage(env, "bulk_study", "--recordings", str(size), "--slug",
                                 f"bench{size}"))
        port = free_port()
        server = subprocess.Popen(
            [sys.executable, "-m", "gunicorn", "portal.wsgi", "--bind", f"127.0.0.1:{port}",
             "--workers", "2", "--timeout", "120", "--log-level", "warning"], cwd=REPO, env=env,
            start_new_session=True)
        deadline = time.monotonic() + 60
        while True:
            try:
                Client(port).request("GET", "/account/login/")
                break
            except OSError:
                if time.monotonic() > deadline:
                    raise SystemExit("gunicorn did not start") from None
                time.sleep(0.3)
        cookie = sign_in(port, made["lead"], made["password"])
        urls = pages(port, cookie, f"bench{size}")
        load(port, cookie, urls, clients=4, seconds=3)  # both workers warm, caches filled
        latencies, rate10 = load(port, cookie, urls, clients=10, seconds=args.seconds)
        _, rate20 = load(port, cookie, urls, clients=20, seconds=args.seconds)
        return {"pages": {page: {"p50_ms": 1000 * quantile(v, 50), "p95_ms": 1000 * quantile(v, 95),
                                 "n": len(v)} for page, v in latencies.items()},
                "throughput_10": rate10, "throughput_20": rate20, "urls": urls}
    finally:
        if server is not None:
            os.killpg(server.pid, signal.SIGTERM)
            server.wait(timeout=30)
        drop(base, name)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=30.0)
    parser.add_argument("--database-url", default=os.environ.get(
        "DATABASE_URL", "postgres://postgres@127.0.0.1:5432/cairn"))
    args = parser.parse_args()
    base = args.database_url.rpartition("/")[0]
    names = database_names(args.database_url)
    results = {size: measure(size, args, base, names[size]) for size in SIZES}
    small, large = results[SIZES[0]], results[SIZES[1]]
    print(f"gunicorn, 2 workers, PostgreSQL; {args.seconds:g} s per load; study lead signed in")
    print(f"{'page':<14}{'recordings':>11}{'p50 ms':>9}{'p95 ms':>9}{'requests':>10}")
    for size, result in results.items():
        for page, row in result["pages"].items():
            print(f"{page:<14}{size:>11}{row['p50_ms']:>9.1f}{row['p95_ms']:>9.1f}{row['n']:>10}")
    for size, result in results.items():
        print(f"{size} recordings: {result['throughput_10']:.1f} requests/s at 10 clients, "
              f"{result['throughput_20']:.1f} at 20")
    print("ratio 1,000 / 100 recordings (the reference, same run):")
    for page in large["pages"]:
        ratio = large["pages"][page]["p95_ms"] / small["pages"][page]["p95_ms"]
        print(f"  {page:<14} p95 ×{ratio:.2f}  p50 ×"
              f"{large['pages'][page]['p50_ms'] / small['pages'][page]['p50_ms']:.2f}")
    print(f"  throughput at 20 clients ×{large['throughput_20'] / small['throughput_20']:.2f}")
    print(json.dumps({str(k): {**v, "urls": v["urls"]} for k, v in results.items()},
                     indent=1, sort_keys=True))


if __name__ == "__main__":
    main()

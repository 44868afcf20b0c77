"""The portal driven in a real browser (Debian's Chromium through Playwright), against the
demo portal started as its own processes (web server and worker), as a user would meet it.

The accessibility check runs axe-core (Deque's rules for WCAG 2.x, shipped inside the
axe-playwright-python package) in each main page and allows no "serious" or "critical"
finding. Screenshots of the main pages land in var/screenshots/ (git-ignored).
"""

import hashlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
import zipfile
from pathlib import Path

import pytest

from tests.helpers import skip_or_fail

REPO = Path(__file__).resolve().parents[2]
SHOTS = Path(os.environ.get("CAIRN_SCREENSHOTS", REPO / "var" / "screenshots"))
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
LAUNCH_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", "--no-first-run"]
STUDY = "rail-workload"
SETTLE_S = 420  # the worker's whole intake, checks and training of the small demo

pytestmark = pytest.mark.browser


def _free_port():
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _database(env):
    """A database of its own for the portal under test: on the PostgreSQL server the suite
    uses when there is one (created fresh, dropped afterwards), else SQLite in its folder."""
    url = os.environ.get("DATABASE_URL", "")
    if not url.startswith("postgres"):
        env.pop("DATABASE_URL", None)
        return None
    import psycopg

    base, _, _ = url.rpartition("/")
    name = f"cairn_browser_{os.getpid()}"
    with psycopg.connect(f"{base}/postgres", autocommit=True) as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}"')
        conn.execute(f'CREATE DATABASE "{name}"')
    env["DATABASE_URL"] = f"{base}/{name}"
    return base, name


def _drop(database):
    if database is None:
        return
    import psycopg

    base, name = database
    with psycopg.connect(f"{base}/postgres", autocommit=True) as conn:
        conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _manage(env, *args, timeout=600):
    done = subprocess.run([sys.executable, "manage.py", *args], cwd=REPO, env=env,
                          capture_output=True, text=True, timeout=timeout)
    assert done.returncode == 0, f"manage.py {' '.join(args)}:\n{done.stdout}\n{done.stderr}"
    return done.stdout


def _logins(var):
    out = {}
    for line in (var / "demo" / "logins.txt").read_text().splitlines()[1:]:
        username, password = line.split()[:2]
        role = {"demo-operator": "operator", "demo-lead": "study_lead",
                "demo-auditor": "auditor"}.get(username, username)
        out[role] = (username, password)
    return out


@pytest.fixture(scope="module")
def portal(tmp_path_factory):
    if not Path(CHROMIUM).exists():
        skip_or_fail("Debian's chromium is not installed (make test installs it)")
    try:
        import playwright  # noqa: F401
    except ImportError:
        skip_or_fail("playwright is not installed (requirements-test.txt)")
    var = tmp_path_factory.mktemp("browser-portal")
    env = dict(os.environ, CAIRN_VAR_DIR=str(var), CAIRN_HTTPS="0", DEBUG="0",
               CAIRN_STATIC_FROM_SOURCE="1", PYTHONHASHSEED="0")
    broker = os.environ.get("CELERY_BROKER_URL", "")
    if broker.startswith("redis://"):
        env["CELERY_BROKER_URL"] = broker.rpartition("/")[0] + "/13"
        import redis

        redis.Redis.from_url(env["CELERY_BROKER_URL"]).flushdb()
    else:
        env.pop("CELERY_BROKER_URL", None)  # the embedded broker, as in the demo
    database = _database(env)
    server = None
    try:
        _manage(env, "migrate", "--noinput")
        _manage(env, "load_demo", "--scale", "small")
        for marker in ("features-wanted", "training-wanted"):  # the test asks for its own
            (var / "demo" / marker).unlink(missing_ok=True)
        port = _free_port()
        log = open(var / "serve.log", "wb")
        server = subprocess.Popen(
            [sys.executable, "manage.py", "serve_demo", "--bind", f"127.0.0.1:{port}",
             "--worker-processes", "2"], cwd=REPO, env=env, stdout=log,
            stderr=subprocess.STDOUT, start_new_session=True)
        base = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 90
        while True:
            try:
                with urllib.request.urlopen(f"{base}/account/login/", timeout=5) as reply:
                    if reply.status == 200:
                        break
            except OSError:
                pass
            if server.poll() is not None or time.monotonic() > deadline:
                raise AssertionError("the portal did not start:\n"
                                     + (var / "serve.log").read_text()[-3000:])
            time.sleep(0.5)
        key = json.loads(next((var / "demo").glob("small-seed*/answer_key.json")).read_text())
        yield {"base": base, "var": var, "logins": _logins(var), "env": env,
               "sites": [s["slug"] for s in key["sites"]],
               "names": {s["slug"]: s["name"] for s in key["sites"]},
               "bids": next((var / "demo").glob("small-seed*")) / key["sites"][0]["bids_root"]}
    finally:
        if server is not None:
            os.killpg(server.pid, signal.SIGTERM)
            try:
                server.wait(timeout=30)
            except subprocess.TimeoutExpired:
                os.killpg(server.pid, signal.SIGKILL)
        _drop(database)


@pytest.fixture(scope="module")
def browser(portal):
    from playwright.sync_api import sync_playwright

    SHOTS.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        yield chromium
        chromium.close()


def sign_in(browser, portal, who, viewport=None):
    username, password = portal["logins"][who]
    context = browser.new_context(base_url=portal["base"], accept_downloads=True,
                                  viewport=viewport or {"width": 1280, "height": 900})
    page = context.new_page()
    page.goto("/account/login/")
    page.get_by_label("Username").fill(username)
    page.get_by_label("Password").fill(password)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_load_state()
    assert page.url.rstrip("/") == portal["base"], page.url
    assert username in page.locator("header").inner_text()
    return page


def shoot(page, name):
    page.screenshot(path=str(SHOTS / f"{name}.png"), full_page=True)


def no_serious_findings(page, what):
    from axe_playwright_python.sync_playwright import Axe

    results = Axe().run(page)
    serious = [(v["id"], v["help"], [n["target"] for n in v["nodes"][:3]])
               for v in results.response["violations"]
               if v.get("impact") in ("serious", "critical")]
    assert not serious, f"{what}: {serious}"


def wait_for(page, check, *, timeout_s, what, reload=True):
    deadline = time.monotonic() + timeout_s
    while not check():
        if time.monotonic() > deadline:
            raise AssertionError(f"{what}: not reached after {timeout_s} s ({page.url})")
        time.sleep(2)
        if reload:
            page.reload()


def dm(portal):
    return f"dm-{portal['sites'][0]}"


def analyst(portal):
    return f"analyst-{portal['sites'][0]}"


def test_each_role_signs_in_and_sees_the_pages_it_may(browser, portal):
    for who in ("operator", "study_lead", "auditor", dm(portal), analyst(portal)):
        page = sign_in(browser, portal, who)
        assert page.get_by_role("heading", level=1).count() == 1
        shoot(page, f"home-{who}")
        no_serious_findings(page, f"home page of {who}")
        page.context.close()


#: Elements of the header that end outside the viewport, or a page wider than it.
OVERFLOW_JS = """() => {
  const width = document.documentElement.clientWidth, out = [];
  const header = document.querySelector("header.top");
  for (const el of [header, ...header.querySelectorAll("*")]) {
    const box = el.getBoundingClientRect();
    if (box.width && (box.left < -0.5 || box.right > width + 0.5))
      out.push(`${el.tagName} "${el.textContent.trim().slice(0, 30)}" ${box.left}-${box.right}`);
  }
  if (document.documentElement.scrollWidth > width + 0.5 && header.scrollWidth > width + 0.5)
    out.push(`header scrolls: ${header.scrollWidth} > ${width}`);
  return out;
}"""


def test_header_fits_a_phone_width_screen(browser, portal):
    """360 px wide (a common small phone): nothing of the header runs off the side, for the
    role with the most header items (the operator) and a site role."""
    for who in ("operator", dm(portal)):
        page = sign_in(browser, portal, who, viewport={"width": 360, "height": 740})
        for path in ("/", f"/sites/{portal['sites'][0]}/"):
            page.goto(path)
            assert page.evaluate(OVERFLOW_JS) == [], (who, path)
        assert page.locator("header.top").get_by_role("button", name="Sign out").is_visible()
        shoot(page, f"header-360px-{who}")
        page.context.close()


def test_data_manager_uploads_through_the_form_and_watches_it_accepted(browser, portal,
                                                                        tmp_path):
    archive = tmp_path / "resubmission.zip"
    with zipfile.ZipFile(archive, "w") as bundle:
        for path in sorted(portal["bids"].rglob("*")):
            if path.is_file():
                bundle.write(path, path.relative_to(portal["bids"]).as_posix())
    page = sign_in(browser, portal, dm(portal))
    page.goto(f"/sites/{portal['sites'][0]}/")
    page.get_by_role("link", name="Send a dataset").click()
    no_serious_findings(page, "upload form")
    page.get_by_label("One archive (.zip, .tar or .tar.gz)").set_input_files(str(archive))
    shoot(page, "upload-form")
    page.get_by_role("button", name="Send").click()
    page.wait_for_url("**/data/uploads/*/", timeout=120_000)
    # From here on the page must not reload: a marker set now survives only without one.
    page.evaluate("window.cairnNoReload = true")
    state = page.locator("[data-upload-state]")
    state.filter(has_text="accepted").wait_for(timeout=SETTLE_S * 1000)
    assert page.evaluate("window.cairnNoReload === true")
    assert "dataset version" in page.locator("#upload-status").inner_text()
    shoot(page, "upload-accepted")
    no_serious_findings(page, "upload page")
    page.context.close()


def test_a_snapshot_that_would_remove_data_waits_for_a_confirmation(browser, portal,
                                                                     tmp_path):
    """A data manager sends the site's dataset as a whole-dataset snapshot without its last
    participant: the page shows, without a reload, that the upload would remove that person
    and their files and asks; cancelling ends the upload rejected and keeps the version."""
    root = portal["bids"]
    leaving = sorted(p.name for p in root.glob("sub-*"))[-1]
    archive = tmp_path / "without-one.zip"
    with zipfile.ZipFile(archive, "w") as bundle:
        for path in sorted(root.rglob("*")):
            relative = path.relative_to(root).as_posix()
            if not path.is_file() or relative.split("/")[0] == leaving:
                continue
            if relative == "participants.tsv":
                rows = path.read_text().splitlines()
                bundle.writestr(relative, "\n".join(
                    r for r in rows if not r.startswith(leaving + "\t")) + "\n")
            else:
                bundle.write(path, relative)
    page = sign_in(browser, portal, dm(portal))
    page.goto(f"/sites/{portal['sites'][0]}/")
    page.get_by_role("link", name="Send a dataset").click()
    page.get_by_label("One archive (.zip, .tar or .tar.gz)").set_input_files(str(archive))
    page.get_by_label("Replace the whole dataset", exact=False).check()
    page.get_by_role("button", name="Send").click()
    page.wait_for_url("**/data/uploads/*/", timeout=120_000)
    page.evaluate("window.cairnNoReload = true")
    removals = page.locator("[data-upload-removals]")
    removals.wait_for(timeout=SETTLE_S * 1000)
    assert page.evaluate("window.cairnNoReload === true")
    text = removals.inner_text()
    assert leaving in text and f"{leaving}/" in text, text
    shoot(page, "upload-held-removals")
    no_serious_findings(page, "held upload")
    page.locator("[data-cancel-removals]").click()
    page.locator('[data-upload-state="rejected"]').wait_for(timeout=30_000)
    assert page.locator("[data-upload-removals]").count() == 0
    page.context.close()


def test_study_lead_reads_the_overview_and_a_recordings_checks(browser, portal):
    page = sign_in(browser, portal, "study_lead")
    page.goto(f"/studies/{STUDY}/")
    # Every site's current data checked (the worker may still be at it when we arrive).
    wait_for(page, lambda: page.get_by_text("not checked yet").count() == 0
             and page.locator("svg.share-bar").count() == len(portal["sites"]),
             timeout_s=SETTLE_S, what="quality checks of every site")
    assert page.locator("svg[role=img]").count() >= 2 * len(portal["sites"]) + 2
    shoot(page, "study-overview")
    no_serious_findings(page, "study overview")
    # A figure leads to the list behind it: a site's verdicts → its quality round → one
    # recording's checks, whose plots load.
    page.locator("a:has(svg.share-bar)").first.click()
    page.wait_for_url("**/quality/rounds/*/")
    shoot(page, "quality-round")
    page.locator("a[href*='/recordings/']").first.click()
    page.wait_for_url("**/recordings/*/")
    page.wait_for_load_state("networkidle")
    assert page.get_by_text("Verdict:").count() == 1
    widths = page.eval_on_selector_all("main img", "els => els.map(e => e.naturalWidth)")
    assert widths and all(w > 0 for w in widths), widths
    shoot(page, "quality-recording")
    no_serious_findings(page, "a recording's quality page")
    page.goto(f"/sites/{portal['sites'][0]}/")
    shoot(page, "site-page")
    no_serious_findings(page, "site page")
    page.context.close()


def test_site_analyst_scrolls_a_recordings_signal_and_changes_its_gain(browser, portal):
    """The signal viewer: the next page and a larger gain replace the viewer in place (no
    reload) and each draws a new image."""
    page = sign_in(browser, portal, analyst(portal))
    page.goto(f"/sites/{portal['sites'][0]}/")
    link = page.locator("a[href*='/quality/rounds/'][href*='/recordings/']")
    wait_for(page, lambda: link.count() > 0, timeout_s=SETTLE_S,
             what="a checked recording on the site's page")
    link.first.click()
    page.wait_for_url("**/recordings/*/")
    wait_for(page, lambda: page.locator("#signal-image").count() == 1, timeout_s=SETTLE_S,
             what="the recording's checks")
    image = page.locator("#signal-image")

    def loaded():
        return page.eval_on_selector("#signal-image", "e => e.complete && e.naturalWidth")

    wait_for(page, loaded, timeout_s=60, what="the first page of traces", reload=False)
    first = image.get_attribute("src")
    assert "start=0&span=10" in first
    page.evaluate("window.cairnNoReload = true")
    page.get_by_role("link", name="next 10 s →").click()
    page.wait_for_function("document.querySelector('#signal-image').src.includes('start=10')")
    wait_for(page, loaded, timeout_s=60, what="the second page of traces", reload=False)
    page.locator("#signal select[name=gain]").select_option("200")
    page.get_by_role("button", name="Show").click()
    page.wait_for_function("document.querySelector('#signal-image').src.includes('gain=200')")
    wait_for(page, loaded, timeout_s=60, what="the traces at 200 µV per division",
             reload=False)
    assert page.evaluate("window.cairnNoReload === true")
    assert "start=10" in image.get_attribute("src") and "start=10" in page.url
    shoot(page, "signal-viewer")
    no_serious_findings(page, "a recording's quality page with its signal viewer")
    page.context.close()


def test_analyst_trains_a_model_and_downloads_the_release(browser, portal):
    site = portal["sites"][0]
    page = sign_in(browser, portal, analyst(portal))
    page.goto(f"/features/studies/{STUDY}/")
    page.locator(f"input[name=sites][value='{site}']").check()
    page.get_by_role("button", name="Compute the feature set").click()
    page.wait_for_url("**/features/*/")
    page.evaluate("window.cairnNoReload = true")
    page.locator("[data-work-state=done]").wait_for(timeout=SETTLE_S * 1000)
    # The finished status part brings the page's results in (htmx swaps <main>), still
    # without a reload; its "Show the results" link is there should that swap fail.
    page.get_by_text("windows (rows)").wait_for(timeout=60_000)
    assert page.evaluate("window.cairnNoReload === true")  # progress came without a reload
    assert page.get_by_text("windows (rows)").count() == 1
    shoot(page, "feature-set")
    no_serious_findings(page, "feature set page")
    set_url = page.url
    set_id = set_url.rstrip("/").rsplit("/", 1)[1]
    page.goto(f"/training/studies/{STUDY}/")
    spec = {"feature_set": int(set_id), "label": {"kind": "level"},
            "features": {"include": ["*.relative_power.*"]},
            "validation": {"scheme": "grouped_kfold", "n_splits": 3},
            "models": [{"learner": "lda"}], "statistics": {"paired_test": False,
                                                          "permutations": 0}, "seed": 0}
    page.get_by_label("Feature set").select_option(set_id)
    page.get_by_label("Or paste a whole spec (JSON)").fill(json.dumps(spec))
    page.get_by_role("button", name="Start the run").click()
    page.wait_for_url("**/training/*/")
    run_url = page.url
    page.evaluate("window.cairnNoReload = true")
    page.locator("[data-work-state=done]").wait_for(timeout=SETTLE_S * 1000)
    assert page.evaluate("window.cairnNoReload === true")
    page.reload()
    assert page.get_by_role("heading", name="Scores").count() == 1
    shoot(page, "training-run")
    no_serious_findings(page, "training run page")
    page.context.close()

    lead = sign_in(browser, portal, "study_lead")
    lead.goto(run_url)
    lead.get_by_role("link", name="Approve for the sites").click()
    lead.wait_for_url("**/approve/")
    assert "Intended use" in lead.locator("pre.model-card").inner_text()  # the card first
    shoot(lead, "release-approve")
    no_serious_findings(lead, "release approval")
    approve = lead.get_by_role("button", name="Approve release")
    approve.click()  # without the explicit yes the form does not go
    assert lead.url.endswith("/approve/")
    lead.get_by_label("I have read this model card").check()
    approve.click()
    lead.wait_for_url(run_url)
    assert lead.get_by_text("is now downloadable by the sites").count() == 1
    lead.context.close()

    page = sign_in(browser, portal, analyst(portal))
    page.goto(f"/training/sites/{site}/releases/")
    assert page.get_by_text("Research use only").count() >= 1
    no_serious_findings(page, "releases page")
    shoot(page, "releases")
    sha = page.locator("tr:has-text('model.skops') code").first.inner_text()
    with page.expect_download() as info:
        page.get_by_role("link", name="model.skops").first.click()
    path = info.value.path()
    assert hashlib.sha256(Path(path).read_bytes()).hexdigest() == sha
    model_url = page.get_by_role("link", name="model.skops").first.get_attribute("href")
    page.context.close()

    lead = sign_in(browser, portal, "study_lead")  # withdrawn: the files are refused
    lead.goto(run_url)
    lead.get_by_role("link", name="Withdraw release").click()
    lead.get_by_label("Reason for the withdrawal").fill("Browser test: superseded.")
    shoot(lead, "release-withdraw")
    lead.get_by_role("button", name="Withdraw release").click()
    lead.wait_for_url(run_url)
    assert lead.get_by_text("Browser test: superseded.").count() == 1
    assert lead.goto(model_url).status == 410
    assert lead.get_by_role("heading", name="was withdrawn").count() == 1
    shoot(lead, "release-withdrawn")
    lead.context.close()


def test_auditor_reads_research_events_and_asks_for_job_bookkeeping(browser, portal):
    page = sign_in(browser, portal, "auditor")
    page.goto("/audit/")
    rows = page.locator("tr[data-verb]")
    verbs = rows.evaluate_all("rows => rows.map(r => r.dataset.verb)")
    assert verbs and not [v for v in verbs if v.split(".")[0] in ("job", "worker")], verbs
    assert "upload.received" in verbs or "dataset_version.created" in verbs, verbs
    shoot(page, "audit-trail")
    no_serious_findings(page, "audit trail")
    page.get_by_label("Include job bookkeeping").check()
    page.get_by_role("button", name="Filter").click()
    page.wait_for_url("**/audit/?*jobs=1*")
    verbs = rows.evaluate_all("rows => rows.map(r => r.dataset.verb)")
    assert [v for v in verbs if v.startswith("job.")], verbs
    shoot(page, "audit-trail-jobs")
    page.context.close()


def test_forbidden_pages_answer_403_or_404_in_the_browser(browser, portal):
    own, other = portal["sites"][0], portal["sites"][1]
    lead = sign_in(browser, portal, "study_lead")  # finds the other site's pages
    lead.goto(f"/sites/{other}/")
    version = lead.locator("#versions ~ table a[href*='/data/versions/']").first.get_attribute(
        "href")
    version_id = version.rstrip("/").rsplit("/", 1)[1]
    lead.context.close()
    page = sign_in(browser, portal, dm(portal))
    for url in (f"/sites/{other}/", f"/training/sites/{other}/releases/", version,
                f"/audit/lineage/version/{version_id}/",
                f"/audit/derived/version/{version_id}/"):
        response = page.goto(url)
        assert response.status == 404, (url, response.status)
        assert portal["names"][other] not in page.content()  # no hint of what is there
        assert page.get_by_role("heading", name="Nothing to show here").count() == 1
    page.context.close()
    page = sign_in(browser, portal, "auditor")
    assert page.goto(f"/data/sites/{own}/upload/").status == 403
    assert page.get_by_role("heading", name="Your role does not allow this").count() == 1
    shoot(page, "forbidden")
    page.goto("/operator/")  # the operator pages send anyone else to their own sign-in
    assert "/operator/login/" in page.url
    page.context.close()
    anonymous = browser.new_context(base_url=portal["base"]).new_page()
    anonymous.goto(f"/studies/{STUDY}/")
    assert "/account/login/" in anonymous.url
    anonymous.context.close()

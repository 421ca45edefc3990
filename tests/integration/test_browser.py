"""The HTML summary in a real headless Chromium, made by the real workflow.

A small invented campaign (inputs/make_campaign.py --count 12, plus one record
whose formula and provenance carry script-injection attempts) is run through the
Snakemake command line twice -- the second time after revising one record and
deleting another, so the change report has something to show -- and the page is
then driven with Selenium: console errors, table rows, plots, filter, toggle,
sort, tooltips, the injection attempts, and a full-page screenshot kept as a
test artifact (in $LAMELLUME_ARTIFACTS when set, else pytest's tmp_path; the
path is printed).

Needs: Debian packages ``chromium`` and ``chromium-driver`` (/usr/bin/chromium,
/usr/bin/chromedriver) and ``selenium`` from envs/requirements-test.txt.
When any of them is missing the tests FAIL if the environment variable CI is
set, and are skipped otherwise.
"""

from __future__ import annotations

import base64
import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import pandas as pd
import pytest
import yaml

ROOT = Path(__file__).resolve().parents[2]
PWN = ['<script>window.__pwned=1</script>', '<img src=x onerror="window.__pwned=1">']
HOSTILE_ID = "hostile-0001"
#: A record whose formula a spreadsheet would run (the page's CSV download must neutralise it).
SHEET_ID = "sheet-0001"
SHEET_FORMULA = '=HYPERLINK("http://example.invalid","x")'
CHROMIUM = os.environ.get("LAMELLUME_CHROMIUM", "/usr/bin/chromium")
CHROMEDRIVER = os.environ.get("LAMELLUME_CHROMEDRIVER", "/usr/bin/chromedriver")

pytestmark = pytest.mark.slow


def _require_browser():
    """Skip (or fail on CI) unless Chromium, its driver and selenium are present."""
    missing = [p for p in (CHROMIUM, CHROMEDRIVER) if not (os.path.isfile(p) and os.access(p, os.X_OK))]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("python package selenium")
    if missing:
        message = ("headless browser test needs " + ", ".join(missing) + ": apt-get install -y chromium "
                   "chromium-driver; pip install -r envs/requirements-test.txt")
        if os.environ.get("CI"):
            pytest.fail(message)
        pytest.skip(message)


def _snakemake(workdir: Path, config: Path) -> None:
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(ROOT / "Snakefile"), "--directory", str(workdir),
           "--configfile", str(config), "--cores", "2", "results/summary.html", "results/shortlist.csv"]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=900, check=False)
    if res.returncode != 0:
        logs = "\n".join(f"--- {p}\n{p.read_text(errors='replace')[-3000:]}"
                         for p in sorted((workdir / "results" / "logs").rglob("*.log")))
        pytest.fail(f"workflow failed ({res.returncode}):\n{res.stderr[-4000:]}\n{logs}")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """Run the real workflow twice on a small campaign; return paths and final tables."""
    _require_browser()
    base = tmp_path_factory.mktemp("browser")
    campaign, workdir = base / "campaign", base / "work"
    subprocess.run([sys.executable, str(ROOT / "inputs" / "make_campaign.py"), "--out", str(campaign),
                    "--count", "12"], check=True, capture_output=True, timeout=300)
    entries = campaign / "entries"
    donor = sorted(p for p in entries.glob("*.json") if not p.name.startswith("broken"))[0]
    record = json.loads(donor.read_text(encoding="utf-8"))
    record.update(id=HOSTILE_ID, formula="".join(PWN), provenance=" ".join(PWN) + " \u2028 & </script>")
    (entries / f"{HOSTILE_ID}.json").write_text(json.dumps(record, indent=1), encoding="utf-8")
    sheet = dict(record, id=SHEET_ID, formula=SHEET_FORMULA, provenance="SYNTHETIC: a formula for spreadsheets")
    (entries / f"{SHEET_ID}.json").write_text(json.dumps(sheet, indent=1), encoding="utf-8")

    with open(ROOT / "config" / "config.yaml", encoding="utf-8") as fh:
        config = yaml.safe_load(fh)
    config["campaign"] = str(campaign)
    (workdir / "config").mkdir(parents=True)
    config_path = workdir / "config" / "config.yaml"
    config_path.write_text(yaml.safe_dump(config, sort_keys=False), encoding="utf-8")
    _snakemake(workdir, config_path)

    # Second run: revise one record, delete another -> the change report has rows.
    valid = sorted(p for p in entries.glob("lumen-*.json"))
    revised = json.loads(valid[1].read_text(encoding="utf-8"))
    revised["valleys"][0]["edge_ev"]["1"] = revised["valleys"][0]["edge_ev"]["1"] + 0.25
    valid[1].write_text(json.dumps(revised, indent=1), encoding="utf-8")
    removed = valid[2].stem
    valid[2].unlink()
    _snakemake(workdir, config_path)

    results = workdir / "results"
    return {
        "html": results / "summary.html",
        "wide": pd.read_parquet(results / "tables" / "screen_wide.parquet"),
        "changes": pd.read_parquet(results / "tables" / "changes.parquet"),
        "revised": valid[1].stem,
        "removed": removed,
    }


@pytest.fixture(scope="module")
def driver(run):
    """Headless Chromium on the summary page (fresh profile, no network services)."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    os.environ.setdefault("SE_OFFLINE", "true")  # never let Selenium Manager go online
    profile = tempfile.mkdtemp(prefix="lamellume-chromium-")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync",
                 f"--user-data-dir={profile}", "--window-size=1440,1000"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    drv = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    try:
        drv.get(run["html"].resolve().as_uri())
        yield drv
    finally:
        drv.quit()
        shutil.rmtree(profile, ignore_errors=True)


def _visible_rows(drv) -> int:
    return drv.execute_script(
        "return Array.from(document.querySelectorAll('#screen-table tbody tr')).filter(r => !r.hidden).length;")


def _header(drv, label: str):
    from selenium.webdriver.common.by import By

    for th in drv.find_elements(By.CSS_SELECTOR, "#screen-table thead th"):
        if th.text.split("\n")[0].strip() == label:
            return th
    raise AssertionError(f"no column header {label!r}")


def _column_values(drv, index: int) -> list[str]:
    return drv.execute_script(
        "return Array.from(document.querySelectorAll('#screen-table tbody tr'))"
        f".map(r => r.cells[{index}].getAttribute('data-v'));")


def test_page_runs_without_console_errors(driver):
    assert driver.execute_script("return document.documentElement.getAttribute('data-ready')") == "1"
    severe = [e for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
    assert not severe, severe


def test_rows_match_the_ranked_table(driver, run):
    wide = run["wide"]
    assert driver.execute_script("return document.querySelectorAll('#screen-table tbody tr').length") == len(wide)
    n_cand = driver.execute_script("return document.querySelectorAll('#screen-table tbody tr[data-candidate=\"1\"]').length")
    assert n_cand == int(wide["meets_all_criteria"].sum())
    ids = driver.execute_script("return Array.from(document.querySelectorAll('#screen-table tbody tr'))"
                                ".map(r => r.getAttribute('data-id'));")
    assert ids == wide.sort_values("rank")["entry_id"].tolist()


def test_plots_are_drawn_with_their_data(driver, run):
    wide = run["wide"]
    count = driver.execute_script
    finite = int((wide["target_optical_gap_ev"].notna() & wide["target_binding_ev"].notna()).sum())
    assert count("return document.querySelectorAll('#plot-binding-gap circle.pt').length") == finite
    assert count("return document.querySelectorAll('#plot-gap-layers polyline').length") >= 1
    assert count("return document.querySelectorAll('#plot-emission rect.bar-all').length") >= 1
    assert count("return document.querySelectorAll('#plot-environment circle.pt').length") >= len(wide)
    box = count("var b = document.getElementById('plot-binding-gap').getBoundingClientRect(); return [b.width, b.height];")
    assert box[0] > 200 and box[1] > 100


def test_filter_and_candidate_toggle(driver, run):
    from selenium.webdriver.common.by import By

    wide = run["wide"]
    box = driver.find_element(By.ID, "filter")
    target = wide.sort_values("rank")["entry_id"].iloc[-1]
    box.clear()
    box.send_keys(target)
    assert _visible_rows(driver) == 1
    assert driver.find_element(By.ID, "shown").text.startswith("1 of")
    box.clear()
    box.send_keys("no-such-compound-anywhere")
    assert _visible_rows(driver) == 0
    driver.execute_script("var f = document.getElementById('filter'); f.value = '';"
                          "f.dispatchEvent(new Event('input'));")
    assert _visible_rows(driver) == len(wide)
    # the thinning state's fixed words filter too (issue 14: states as documented values)
    state = "direct when thin"
    box.send_keys(state)
    assert _visible_rows(driver) == int((wide["thinning_state"] == state).sum()) > 0
    driver.execute_script("var f = document.getElementById('filter'); f.value = '';"
                          "f.dispatchEvent(new Event('input'));")
    toggle = driver.find_element(By.ID, "only-cand")
    toggle.click()
    assert _visible_rows(driver) == int(wide["meets_all_criteria"].sum())
    dimmed = driver.execute_script("return document.querySelectorAll('#plot-binding-gap circle.pt.dim').length")
    assert dimmed == int((~wide["meets_all_criteria"]).sum())
    toggle.click()
    assert _visible_rows(driver) == len(wide)


def test_sorting_by_clicking_headers(driver, run):
    th = _header(driver, "Score")
    index = driver.execute_script("return Array.prototype.indexOf.call(arguments[0].parentNode.children, arguments[0]);", th)
    th.click()
    up = [float(v) for v in _column_values(driver, index) if v]
    assert up == sorted(up) and len(up) == len(run["wide"])
    th.click()
    down = [float(v) for v in _column_values(driver, index) if v]
    assert down == sorted(down, reverse=True)
    assert th.get_attribute("aria-sort") == "descending"
    name = _header(driver, "Compound")
    name.click()
    ids = driver.execute_script("return Array.from(document.querySelectorAll('#screen-table tbody tr'))"
                                ".map(r => r.getAttribute('data-id'));")
    assert ids == sorted(ids, key=str.lower)
    _header(driver, "Rank").click()  # back to the ranked order for the screenshot


def test_tooltip_names_the_compound(driver):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.by import By

    # The first dot that is on top at its own centre: compounds with equal values share a
    # position, and the pointer then reaches only the one drawn last.
    driver.execute_script("document.getElementById('plot-binding-gap').scrollIntoView({block: 'center'});")
    dot = driver.execute_script("""
        for (const c of document.querySelectorAll('#plot-binding-gap circle.pt')) {
            const r = c.getBoundingClientRect();
            if (document.elementFromPoint(r.x + r.width / 2, r.y + r.height / 2) === c) return c;
        }
        return null;""")
    assert dot is not None, "no dot of the binding-gap plot is reachable by the pointer"
    ActionChains(driver).move_to_element(dot).perform()
    tip = driver.find_element(By.ID, "tip")
    assert tip.is_displayed()
    assert dot.get_attribute("data-id") in tip.text
    ActionChains(driver).move_by_offset(0, 300).perform()


def test_injection_attempts_stay_text(driver):
    from selenium.webdriver.common.by import By

    assert driver.execute_script("return typeof window.__pwned") == "undefined"
    assert driver.execute_script("return document.querySelectorAll('img').length") == 0
    scripts = driver.execute_script("return document.scripts.length")
    assert scripts == 2  # the JSON data block and the page's own script
    formula = driver.find_element(By.CSS_SELECTOR, f"#row-{HOSTILE_ID} .formula")
    assert formula.get_attribute("textContent") == "".join(PWN)
    # The hostile record appears in the plots' tooltips as text too.
    tips = driver.execute_script(
        f"return Array.from(document.querySelectorAll('[data-id=\"{HOSTILE_ID}\"][data-tip]')).map(e => e.getAttribute('data-tip'));")
    assert tips and all("<script>" in t for t in tips[:1])
    assert driver.execute_script("return typeof window.__pwned") == "undefined"


def test_change_report_lists_the_revision(driver, run):
    from selenium.webdriver.common.by import By

    changes = run["changes"]
    assert run["removed"] in set(changes["entry_id"])
    assert changes.set_index("entry_id").loc[run["revised"], "input_revised"]
    section = driver.find_element(By.ID, "changes").text
    assert run["removed"] in section and run["revised"] in section
    assert "removed" in section


def test_screenshot_artifact(driver, tmp_path):
    folder = Path(os.environ.get("LAMELLUME_ARTIFACTS") or tmp_path)
    folder.mkdir(parents=True, exist_ok=True)
    driver.execute_script("window.scrollTo(0, 0);")
    height = driver.execute_script("return document.documentElement.scrollHeight")
    driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride",
                           {"width": 1440, "height": int(height), "deviceScaleFactor": 1, "mobile": False})
    try:
        shot = driver.execute_cdp_cmd("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True})
        path = folder / "summary.png"
        path.write_bytes(base64.b64decode(shot["data"]))
        driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
        pdf = driver.execute_cdp_cmd("Page.printToPDF", {"printBackground": True, "preferCSSPageSize": False})
        (folder / "summary-print.pdf").write_bytes(base64.b64decode(pdf["data"]))
    finally:
        driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})
        driver.execute_cdp_cmd("Emulation.clearDeviceMetricsOverride", {})
    assert path.stat().st_size > 10_000 and path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    print(f"summary screenshot: {path}")
    print(f"summary print preview: {folder / 'summary-print.pdf'}")


def test_every_plot_has_a_legend_and_colours_keep_one_meaning(driver, run):
    legends = driver.execute_script(
        "return Array.from(document.querySelectorAll('figure.plot')).map(f => "
        "Array.from(f.querySelectorAll('ul.keys li')).filter(li => li.getBoundingClientRect().width > 0).length);")
    assert len(legends) == 4 and min(legends) >= 2, legends
    palette = driver.execute_script("var p = document.querySelector('.palette'); "
                                    "return p && p.getBoundingClientRect().height > 0 ? p.textContent : '';")
    assert "direct gap" in palette and "candidate" in palette
    # A dot's colour is its gap character, whichever figure it is in; candidates differ by outline.
    colours = driver.execute_script(
        "var style = getComputedStyle(document.documentElement);"
        "function probe(c) { var s = document.createElement('span'); s.style.color = c;"
        " document.body.appendChild(s); var v = getComputedStyle(s).color; s.remove(); return v; }"
        "var want = {direct: probe(style.getPropertyValue('--c-direct')),"
        " indirect: probe(style.getPropertyValue('--c-indirect'))};"
        "var bad = [];"
        "['direct', 'indirect'].forEach(function (g) {"
        " document.querySelectorAll('svg.chart circle.pt.g-' + g).forEach(function (c) {"
        "  if (getComputedStyle(c).fill !== want[g]) { bad.push(c.getAttribute('data-id')); } }); });"
        "var cand = document.querySelector('#plot-binding-gap circle.pt.cand');"
        "var other = document.querySelector('#plot-binding-gap circle.pt:not(.cand)');"
        "return {bad: bad, direct: document.querySelectorAll('svg.chart circle.pt.g-direct').length,"
        " candStroke: cand ? getComputedStyle(cand).stroke : null,"
        " otherStroke: other ? getComputedStyle(other).stroke : null};")
    assert colours["direct"] > 0 and not colours["bad"], colours
    if int(run["wide"]["meets_all_criteria"].sum()) and int((~run["wide"]["meets_all_criteria"]).sum()):
        assert colours["candStroke"] != colours["otherStroke"]


def test_surroundings_and_checks_are_shown_in_words(driver, run):
    """Issue 14 item 7: no config key or stage name reaches people; surroundings carry their constants."""
    plots = driver.execute_script(
        "return Array.from(document.querySelectorAll('figure.plot')).map(f => f.textContent).join(' ');")
    # config/config.yaml: encapsulated 4.5 / 4.5 (the ranking), on_silica 1.0 / 3.9
    assert "encapsulated (above 4.5, below 4.5)" in plots and "on_silica" not in plots
    # the binding-per-surroundings groups: name and layer count, then the constants, on short lines
    labels = driver.execute_script(
        "return Array.from(document.querySelectorAll('#plot-environment text.group-label')).map(t => {"
        "const b = t.getBBox(); return {text: t.textContent, y: t.getAttribute('y'), x0: b.x, x1: b.x + b.width};});")
    texts = [label["text"] for label in labels]
    assert "on silica (1 L)" in texts and "below 3.9" in texts and "bulk crystal" in texts, texts
    for row in {label["y"] for label in labels}:  # neighbouring labels of one line never overlap
        line = sorted((label for label in labels if label["y"] == row), key=lambda label: label["x0"])
        assert all(a["x1"] <= b["x0"] for a, b in zip(line, line[1:])), line
    page = driver.execute_script("return document.body.innerText;")
    assert "on_silica" not in page
    checks = driver.execute_script(
        "return Array.from(document.querySelectorAll('#rejects tbody tr')).map(r => r.cells[3].textContent);")
    assert checks and "record breaks the input contract (schema or physical checks)" in checks
    assert not set(checks) & {"contract", "read", "structure", "normalise", "duplicate", "skipped"}


def test_cards_plan_the_first_experiment(driver, run):
    # Issue 18: every card of "What to make first" plans the first experiment, in model-estimate wording.
    cards = driver.execute_script(
        "return Array.from(document.querySelectorAll('#make-first article.card')).map(c => ({"
        "labels: Array.from(c.querySelectorAll('dl.plan dt')).map(d => d.textContent.trim()),"
        "emission: Array.from(c.querySelectorAll('dl.plan dd')).map(d => d.innerText)[1] || '',"
        "head: (c.querySelector('.plan-head') || {}).textContent || '',"
        "text: c.innerText}));")
    assert cards, "no card on the page"
    with open(ROOT / "config" / "config.yaml", encoding="utf-8") as fh:
        envs = yaml.safe_load(fh)["environments"]
    for card in cards:
        assert card["labels"] == ["Make", "Expected emission", "Quick test", "Measure at", "Pump below"]
        assert "model estimates" in card["head"]
        # one expected range per surroundings, each with its dielectric constants
        assert card["emission"].count("dielectric constant") == len(envs), card["emission"]
        assert "16\u201384 %" in card["emission"]
        assert "reflectance" in card["text"].lower() and "cooling" in card["text"]
        assert "Mott estimate" in card["text"] and "cm\u207b\u00b2" in card["text"]
        assert "Brightness proxy: about" in card["text"] and "s\u207b\u00b9" in card["text"]
    body = driver.execute_script("return document.body.innerText")
    assert "Emits at" not in body and "100 % of pairs" not in body
    assert "given the input uncertainties" in body


def test_download_button_writes_a_spreadsheet_safe_csv(driver, run):
    """The page's "Download shown rows (CSV)" follows the rule of the CSV files (README, "Input
    contract"): source OWASP "CSV Injection" (a text cell starting with =, +, -, @, tab or
    carriage return gets a leading single quote; numbers stay numbers)."""
    import csv
    import io

    driver.execute_script("var f = document.getElementById('filter'); f.value = '';"
                          "f.dispatchEvent(new Event('input'));")
    text = driver.execute_async_script("""
        const done = arguments[arguments.length - 1];
        const make = URL.createObjectURL, click = HTMLAnchorElement.prototype.click;
        HTMLAnchorElement.prototype.click = function () {};  // keep the file: nothing is saved
        URL.createObjectURL = function (blob) { blob.text().then(done); return make.call(URL, blob); };
        try { document.getElementById('csv').click(); }
        finally { URL.createObjectURL = make; HTMLAnchorElement.prototype.click = click; }""")
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == _visible_rows(driver) == len(run["wide"])
    sheet = next(r for r in rows if r["compound"] == SHEET_ID)
    assert sheet["formula"] == "'" + SHEET_FORMULA
    hostile = next(r for r in rows if r["compound"] == HOSTILE_ID)
    assert hostile["formula"] == "".join(PWN)  # text that starts otherwise is left as it is
    wide = run["wide"].set_index("entry_id")
    for row in rows:  # numbers stay numbers
        assert float(row["score"]) == pytest.approx(float(wide.loc[row["compound"], "score"]), abs=1e-4)

"""The report: contents, escaping, atomic writing, and a real browser rendering it."""
import json
import os
import shutil
import subprocess
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import flawmix as fm
from flawmix.cli import demo_paths
from flawmix.report import write_report
from flawmix.study import read_study


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    csv, toml = demo_paths()
    study = read_study(toml)
    sp = fm.read_specimens(csv, study.populations, study.unit)
    out = tmp_path_factory.mktemp("rep") / "report"
    write_report(sp, out, study=study, bayes=False, boundary_replicates=0, seed=1)
    return out


def test_report_contents(demo_report):
    page = (demo_report / "report.html").read_text()
    for text in ["1. The question and the data", "Probability plot", "Estimates per population",
                 "One population or several", "Which flaw population limits strength", "The component: seal ring",
                 "Methods and references", "Software", "Cautions", "licensed engineering", "SHA-256"]:
        assert text in page
    assert "<script" not in page.lower()
    assert page.count("data:image/png;base64,") >= 5
    results = json.loads((demo_report / "results.json").read_text())
    assert results["method"] == "mle" and "comparison" in results and "prediction" in results
    for name in ["probability_plot", "failure_shares", "size_effect"]:
        assert (demo_report / "figures" / f"{name}.png").stat().st_size > 1000
        assert (demo_report / "figures" / f"{name}.svg").read_text().lstrip().startswith("<?xml")
    estimates = pd.read_csv(demo_report / "tables" / "estimates.csv")
    assert list(estimates["population"]) == ["pores", "grinding"]


def test_user_text_is_escaped(tmp_path):
    frame = pd.DataFrame({"specimen": ["<script>alert(1)</script>", "b", "c", "d", "e", "f"],
                          "strength": [300, 320, 350, 370, 390, 410.0],
                          "origin": ["<img src=x onerror=alert(1)>", "pore", "pore", "<img src=x onerror=alert(1)>",
                                     "pore", "<img src=x onerror=alert(1)>"]})
    path = tmp_path / "evil.csv"
    frame.to_csv(path, index=False)
    write_report(fm.read_specimens(path), tmp_path / "out", bayes=False, boundary_replicates=0)
    page = (tmp_path / "out" / "report.html").read_text()
    assert "<script" not in page and "<img src=x" not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page


def test_existing_folder_needs_force_and_failures_leave_it_intact(tmp_path, demo_report):
    out = tmp_path / "r"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    sp = fm.read_specimens(demo_paths()[0])
    with pytest.raises(fm.FlawmixError, match="--force"):
        write_report(sp, out, bayes=False, boundary_replicates=0)
    # a folder of other files is never wiped, not even with force
    with pytest.raises(fm.FlawmixError, match="not a flawmix report folder"):
        write_report(sp, out, force=True, compare_models=False)
    assert (out / "keep.txt").read_text() == "mine"
    report = tmp_path / "report"
    write_report(sp, report, compare_models=False)
    first = (report / "results.json").read_text()
    write_report(sp, report, force=True, compare_models=False, seed=5)
    assert (report / "results.json").read_text() != first
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]   # no temporary folders left


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.browser
def test_report_renders_in_headless_chromium(demo_report, tmp_path):
    browser = _chromium()
    if browser is None:
        if os.environ.get("CI"):
            pytest.fail("Chromium is required in CI (.ci/run installs Debian's chromium)")
        pytest.skip("no Chromium on this machine")
    websocket = pytest.importorskip("websocket")
    profile = tmp_path / "profile"
    proc = subprocess.Popen([browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                             "--disable-background-networking", "--disable-component-update", "--disable-sync",
                             "--disable-quic", "--remote-allow-origins=*",
                             "--remote-debugging-port=0", f"--user-data-dir={profile}", "--window-size=1100,1400",
                             "about:blank"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        port_file = profile / "DevToolsActivePort"
        for _ in range(200):
            if port_file.exists() and port_file.read_text().strip():
                break
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        targets = json.loads(urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10).read())
        page = next(t for t in targets if t["type"] == "page")
        ws = websocket.create_connection(page["webSocketDebuggerUrl"], timeout=30)
        counter = iter(range(1, 10_000))
        events = []

        def call(method, **params):
            ident = next(counter)
            ws.send(json.dumps({"id": ident, "method": method, "params": params}))
            while True:
                msg = json.loads(ws.recv())
                if msg.get("id") == ident:
                    return msg.get("result", {})
                events.append(msg)

        for domain in ("Page", "Runtime", "Log"):
            call(f"{domain}.enable")
        call("Page.navigate", url=(demo_report / "report.html").resolve().as_uri())
        deadline = time.time() + 30
        while not any(e.get("method") == "Page.loadEventFired" for e in events) and time.time() < deadline:
            events.append(json.loads(ws.recv()))
        images = call("Runtime.evaluate", returnByValue=True,
                      expression="Array.from(document.images).map(i => [i.complete, i.naturalWidth])")["result"]["value"]
        shot = call("Page.captureScreenshot", format="png")["data"]
        (tmp_path / "report.png").write_bytes(__import__("base64").b64decode(shot))
        ws.close()
    finally:
        proc.terminate()
        proc.wait(timeout=10)
    assert len(images) >= 5 and all(done and width > 0 for done, width in images)
    errors = [e for e in events if e.get("method") == "Runtime.exceptionThrown"
              or (e.get("method") == "Runtime.consoleAPICalled" and e["params"].get("type") == "error")
              or (e.get("method") == "Log.entryAdded" and e["params"]["entry"].get("level") == "error")]
    assert errors == []
    assert (tmp_path / "report.png").stat().st_size > 10_000


def test_report_for_specimens_of_two_geometries(tmp_path):
    # the likelihood contours must use each specimen's own geometry (this used to crash)
    from flawmix.geometry import Geometry
    rng = np.random.default_rng(80)
    specs = {"B": {"type": "flexure-4pt", "width": 4, "depth": 3, "outer_span": 40, "inner_span": 20},
             "L": {"type": "flexure-4pt", "width": 8, "depth": 6, "outer_span": 80, "inner_span": 40}}
    m, s0, rows = np.array([6.0, 15.0]), np.array([700.0, 600.0]), []
    for name in specs:
        g = Geometry.from_spec(name, specs[name])
        scale = s0 * np.exp(-np.array([g.log_size(k, mm) for k, mm in zip(["volume", "surface"], m)]) / m)
        d = scale * rng.weibull(1.0, (40, 2)) ** (1 / m)
        rows.append(pd.DataFrame({"strength": d.min(1), "origin": np.where(d.argmin(1) == 0, "pore", "grind"),
                                  "geometry": name}))
    pd.concat(rows).to_csv(tmp_path / "bars.csv", index=False)
    lines = ['specimens = "bars.csv"', "[populations.pore]", 'kind = "volume"', "[populations.grind]",
             'kind = "surface"']
    for name, spec in specs.items():
        lines += [f"[geometries.{name}]"] + [f'{k} = "{v}"' if isinstance(v, str) else f"{k} = {v}" for k, v in spec.items()]
    (tmp_path / "study.toml").write_text("\n".join(lines) + "\n")
    study = read_study(tmp_path / "study.toml")
    sp = fm.read_specimens(study.specimens, study.populations)
    write_report(sp, tmp_path / "out", study=study)
    page = (tmp_path / "out" / "report.html").read_text()
    assert "Likelihood contours of population &#x27;pore&#x27;" in page


def test_report_shows_the_lot_comparison_when_the_table_has_lots(tmp_path):
    """The invented two-lot example (examples/lots/): a lot section with the verdict and the
    lot figure, and the same comparison in results.json; the demo (no lot column) has none."""
    from flawmix.lots import compare_lots

    folder = Path(__file__).resolve().parents[1] / "examples" / "lots"
    study = read_study(folder / "wheel_change.toml")
    sp = fm.read_specimens(study.specimens, study.populations, study.unit)
    write_report(sp, tmp_path / "out", study=study, compare_models=False, bayes=False, boundary_replicates=0)
    page = (tmp_path / "out" / "report.html").read_text()
    assert "Lots compared population by population" in page
    assert (tmp_path / "out" / "figures" / "lots_probability_plots.png").stat().st_size > 5000
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert results["lots"]["verdict"] == compare_lots(None, study=study).verdict
    import html

    assert html.escape(results["lots"]["verdict"].split(";")[0], quote=True) in page
    assert "p-values: parametric bootstrap of the null fit, 299 replicates." in page
    # grinding changed in the example: the pooled sections are said to mix the lots
    assert "The lots differ (grinding changed)" in page
    assert results["lots"]["populations"][0]["same_population"]["reference"].startswith("parametric bootstrap")


def test_demo_report_has_no_lot_section(demo_report):
    assert "Lots compared" not in (demo_report / "report.html").read_text()

"""The review page: content and escaping, the command line, and the page opened in headless Chromium."""

from __future__ import annotations

import base64
import contextlib
import fcntl
import html
import http.server
import io
import json
import os
import re
import select
import shutil
import subprocess
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from PIL import Image

from tradewise import choose
from tradewise.case import Objective
from tradewise.cli import main
from tradewise.errors import DataError
from tradewise.front import Front, read_front
from tradewise.report import build_report, safety_domains, write_report
from tradewise.runinfo import RunInfo

HOSTILE_TITLE = 'Fan <script>window.__pwned = 1</script> & "cooler" test'

CASE_TOML = """
title = '''{title}'''
description = "Invented scenario for the review page test: a <b>bold</b> claim & a fan."
cautions = "Screening only. Surfaces get hot <img src=x>."
model = "model.py:evaluate"

[variables]
x = {{ type = "real", low = 0.0, high = 1.0, unit = "mm" }}
grade = {{ type = "choice", options = ["A", "B<"] }}

[objectives]
resistance = {{ goal = "min", unit = "K/W" }}
mass = {{ goal = "min", unit = "g" }}

[constraints]
gap = {{ min = 0.1, unit = "mm" }}

[search]
population = 20
evaluations = 400
seed = 3
"""

CASE_MODEL = """
def evaluate(design):
    x = design["x"]
    extra = 0.05 if design["grade"] == "A" else 0.0
    return {"resistance": x + extra, "mass": (1 - x) ** 2 + 0.1 + extra, "gap": x + 0.05}
"""


def small_front(meta: dict | None = None) -> Front:
    """A ZDT1-shaped front (f2 = 1 - sqrt(f1), Zitzler, Deb and Thiele 2000) with units and a run description."""
    f1 = np.linspace(0, 1, 21)
    table = pd.DataFrame(
        {"cost": 100 + 900 * f1, "mass": 2 + 8 * (1 - np.sqrt(f1)), "t": np.linspace(1, 3, 21)}
    )
    base = {
        "title": "Bracket",
        "stop_reason": "the evaluation budget was used up",
        "settings": {"evaluations": 600, "population": 30},
        "n_evals": 600,
        "n_gen": 20,
        "n_failed": 0,
    }
    base.update(meta or {})
    return Front.from_table(
        table,
        [Objective("cost", "min", "EUR"), Objective("mass", "min", "kg")],
        variables=["t"],
        units={"t": "mm"},
        reference=(1100.0, 11.0),
        info=RunInfo.from_json(base, "test"),
    )


@pytest.fixture
def run_folder(make_case, tmp_path) -> Path:
    """A real run of a small invented case whose title and texts carry HTML."""
    folder = make_case(CASE_TOML.format(title=HOSTILE_TITLE), CASE_MODEL, name="hostile")
    out = tmp_path / "run"
    result = CliRunner().invoke(main, ["run", str(folder), "--out", str(out), "--quiet"])
    assert result.exit_code == 0, result.output
    return out


# ------------------------------------------------------------------------------- the page as text
def test_text_from_the_case_is_escaped_and_nothing_external_is_referenced(run_folder, tmp_path):
    """The title, description and cautions appear escaped; the only script is ours; no http(s) URL is in the page."""
    result = CliRunner().invoke(
        main, ["report", str(run_folder), "--out", str(tmp_path / "page.html")]
    )
    assert result.exit_code == 0, result.output
    text = (tmp_path / "page.html").read_text(encoding="utf-8")
    assert html.escape(HOSTILE_TITLE) in text
    assert "window.__pwned" in text and "<script>window.__pwned" not in text
    assert "a &lt;b&gt;bold&lt;/b&gt; claim &amp; a fan" in text
    assert "hot &lt;img src=x&gt;" in text and "<img" not in text
    assert text.count("<script") == 1
    assert re.search(r"https?://", text) is None
    csp = re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', text).group(1)
    assert (
        "default-src 'none'" in csp
        and "'unsafe-inline'" not in csp.split("script-src")[1].split(";")[0]
    )
    assert text.count("<svg") == 3  # front, parallel coordinates, convergence


def test_page_lists_the_case_the_run_and_every_design(run_folder):
    """Variables, objectives, constraints with units, run facts, and one table row per design with its values."""
    front = read_front(run_folder)
    text = build_report(front, history=pd.read_csv(run_folder / "history.csv"))
    for needed in (
        "K/W",
        "at least 0.1",
        "A, B&lt;",
        "NSGA-II",
        "the evaluation budget was used up",
        "seed",
    ):
        assert needed in text, needed
    body = text.split('<table id="front-table">')[1].split("</table>")[0]
    # a heading as the screen shows it: the printed copy of its words (last in the cell) left out
    heads = [
        re.sub(r"<[^>]+>", "", re.sub(r'<span class="printed".*$', "", h))
        for h in re.findall(r"<th[^>]*>(.*?)</th>", body)
    ]
    column = next(k for k, h in enumerate(heads) if h.startswith("resistance"))
    assert heads[column] == "resistance [K/W]"
    rows = re.findall(r"<tr[^>]*>(.*?)</tr>", body.split("<tbody>")[1])
    assert len(rows) == len(front)
    cells = [re.findall(r"<td([^>]*)>", row)[column] for row in rows]
    shown = [float(re.search(r'data-value="([^"]+)"', attributes).group(1)) for attributes in cells]
    np.testing.assert_allclose(shown, front.table["resistance"].to_numpy(), rtol=1e-12)


def test_failed_evaluations_are_told_apart_on_the_page():
    """The run facts count timeouts and errors apart, commonest message first, fresh evaluations only."""
    front = small_front({"n_failed": 4})
    evaluations = pd.DataFrame(
        {
            "status": ["ok", "failed", "failed", "timeout", "failed", "failed"],
            "message": ["", "ValueError: no root", "ValueError: no root", "late", "KeyError: m", "ValueError: no root"],
            # the last one is a design reused from the archive: it failed once, in its own run
            "source_id": [None, None, None, None, None, 7],
        }
    )  # fmt: skip
    told = _run_entry(build_report(front, evaluations=evaluations), "failed evaluations")
    assert told.startswith(
        "4 evaluation(s) failed: 1 ran past the timeout; 3 with an error "
        "(commonest: 2 x ValueError: no root, 1 x KeyError: m)"
    ), told
    assert "failed.csv" in told
    plain = _run_entry(build_report(front), "failed evaluations")
    assert plain.startswith("4 (stored with their message")


def _run_entry(text: str, label: str) -> str:
    """The value beside ``label`` in the page's list of run facts, as a reader sees it."""
    found = re.search(rf"<dt>{re.escape(label)}</dt><dd>([^<]*)</dd>", text)
    assert found, label
    return html.unescape(found.group(1))


def test_knee_and_picks_on_the_page_are_those_of_choose():
    """The knee and the compromise designs named on the page are the ones tradewise.choose picks."""
    front = small_front()
    text = build_report(front)
    knee = choose.choose(front, "knee")[0]
    assert f"Knee design: row {knee + 1}</h3>" in text
    for method, row in choose.all_picks(front).items():
        assert f"<dt>{method}</dt>" in text
        assert f"row {row + 1}" in text
    assert "Trade-off rates</p>" in text and "EUR more cost per" in text


def test_safety_statement_appears_for_structures_packs_and_heat_only():
    """A girder, a battery pack and a heat sink get the licensed-professional statement; a plain bracket does not."""
    for title, domain in (
        ("Steel girder for a footbridge", "structures"),
        ("Battery pack for a cargo bike", "electrical packs"),
        ("Heat sink for a module", "heat"),
    ):
        front = small_front({"title": title})
        assert safety_domains(front) == [domain]
        text = build_report(front)
        assert "qualified, licensed professional" in text and "screening estimate" in text
    plain = small_front({"title": "Bracket shape study"})
    assert safety_domains(plain) == []
    assert "licensed" not in build_report(plain)


def test_the_safety_statement_follows_declared_hazards_not_column_names():
    """A case that declares its hazards gets the statement naming them; an output merely called
    deflection or a unit in MPa no longer triggers it, and neither does a word in the cautions."""
    declared = small_front({"hazards": ["stored energy", "structures"]})
    assert safety_domains(declared) == ["stored energy", "structures"]
    assert "This case touches stored energy and structures." in build_report(declared)
    front = small_front({"cautions": "Temperature effects are not checked."})
    table = front.table.assign(deflection=1.0)
    front = front.with_table(table)
    front.units["deflection"] = "mm"
    assert safety_domains(front) == []
    assert "licensed" not in build_report(front)


def test_empty_front_and_wrong_suffix_are_refused(tmp_path):
    """An empty front and an output name without .html raise DataError."""
    front = small_front()
    with pytest.raises(DataError, match="no designs"):
        build_report(front.with_table(front.table.iloc[0:0]))
    with pytest.raises(DataError, match=r"\.html"):
        write_report(front, tmp_path / "page.pdf")


def test_report_and_plot_commands_on_a_run_folder(run_folder, tmp_path):
    """`report` writes RUN/review.html by default and `plot` writes each kind; user mistakes exit 2 with one line."""
    runner = CliRunner()
    result = runner.invoke(main, ["report", str(run_folder)])
    assert result.exit_code == 0, result.output
    assert (run_folder / "review.html").stat().st_size > 10_000
    for kind in ("front", "parallel", "history"):
        result = runner.invoke(main, ["plot", str(run_folder), "--kind", kind])
        assert result.exit_code == 0, result.output
        with Image.open(run_folder / f"{kind}.png") as image:
            assert image.size[0] > 600
    second = int(read_front(run_folder).table["eval_id"].iloc[1])
    result = runner.invoke(
        main, ["plot", str(run_folder), "--out", str(tmp_path / "f.svg"), "--design", str(second)]
    )
    assert result.exit_code == 0 and (tmp_path / "f.svg").read_text().count("<svg") == 1
    assert f"design {second}" in (tmp_path / "f.svg").read_text()
    result = runner.invoke(main, ["plot", str(tmp_path / "nowhere")])
    assert (
        result.exit_code == 2
        and result.output.startswith("Error: ")
        and "not a run folder" in result.output
    )
    result = runner.invoke(main, ["plot", str(run_folder), "--design", "99999"])
    assert (
        result.exit_code == 2 and "--design: 99999 is not a design of this front" in result.output
    )


def test_a_front_without_a_knee_says_so_and_marks_none():
    """A concave front (f2 = 1 - f1^2, ZDT2's shape, Zitzler, Deb and Thiele 2000) has no knee: the
    page says so in words and neither a caption nor a card calls any design the knee; the ZDT1-shaped
    front keeps its knee sentence and amber diamond."""
    f1 = np.linspace(0, 1, 21)
    table = pd.DataFrame({"cost": 100 + 900 * f1, "mass": 2 + 8 * (1 - f1**2)})
    front = Front.from_table(
        table, [Objective("cost"), Objective("mass")], info=RunInfo(title="Tray")
    )
    assert not choose.find_knees(front).has_knee
    picks = _section(build_report(front), "picks")
    assert "This front has no knee" in picks
    assert "no design is marked as a knee" in picks
    assert "amber" not in picks and "Knee design" not in picks
    with_knee = _section(build_report(small_front()), "picks")
    assert "This front has no knee" not in with_knee
    assert "The knee is the amber diamond" in with_knee and "drawn in amber" in with_knee


# ------------------------------------------------------------------------------- shortlist and seeds
def _facts(text: str) -> dict[str, str]:
    return dict(
        (label, value)
        for value, label in re.findall(
            r'<div class="fact"><b>([^<]*)</b><span>([^<]*)</span>', text
        )
    )


def _section(text: str, name: str) -> str:
    return text.split(f'<section id="{name}">')[1].split("</section>")[0]


def test_shortlist_page_keeps_the_whole_front_and_lists_the_designs_in_pick_order(
    run_folder, tmp_path
):
    """`report RUN --shortlist FILE.csv` with a 2-design shortlist: the page still counts every design of the
    front and gives its hypervolume (checked against moocore), lists the two designs in pick order with their
    values and rates, rings them on the figure, tags them in the table and escapes the shortlist's texts."""
    import moocore

    front = read_front(run_folder)
    assert len(front) >= 6
    chosen = [5, 1]  # picked first: row 6, then row 2
    table = front.table.iloc[chosen[::-1]].copy()  # the file lists them out of pick order
    table.insert(0, "front_row", [r + 1 for r in chosen[::-1]])
    table.insert(0, "pick_order", [2, 1])
    settings = {
        "method": "topsis",
        "limits": ["mass <= <b>9</b>"],
        "rows": [6, 2],
        "n_front": len(front),
    }
    shortlist = Front(table=table.reset_index(drop=True), objectives=front.objectives, units=front.units,
                      variables=front.variables, reference=front.reference,
                      info=front.info.but(shortlist=settings))  # fmt: skip
    shortlist.to_csv(tmp_path / "short.csv")
    result = CliRunner().invoke(
        main, ["report", str(run_folder), "--shortlist", str(tmp_path / "short.csv"),
               "--out", str(tmp_path / "page.html")],
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    text = (tmp_path / "page.html").read_text(encoding="utf-8")
    facts = _facts(text)
    assert facts["designs on the front"] == str(len(front))
    assert facts["designs on the shortlist"] == "2"
    # the share of the box from the front's best values to the reference point (all minimised here)
    box = np.prod(np.asarray(front.reference) - front.points().min(axis=0))
    expected_hv = moocore.hypervolume(front.points(), ref=np.asarray(front.reference)) / box
    covered = facts["of the box from the best values to the reference point, covered"]
    assert float(covered.rstrip(" %")) == pytest.approx(100 * expected_hv, abs=0.05)
    assert html.escape(HOSTILE_TITLE) in text and "shortlist of" not in text
    part = _section(text, "shortlist")
    ids = [str(front.table["eval_id"].iloc[row]) for row in chosen]
    assert re.findall(r"<h3>(\d+)\. design (\d+)</h3>", part) == [("1", ids[0]), ("2", ids[1])]
    cards = part.split('<div class="cards">')[1]
    for row, card in zip(chosen, cards.split('<div class="pick listed">')[1:], strict=True):
        shown = re.search(r"resistance = <b>([^<]+)</b>", card).group(1)
        assert float(shown) == pytest.approx(front.table["resistance"].iloc[row], rel=1e-4)
    assert part.count("Trade-off rates on the whole front") == 2
    assert (
        "the topsis method; limits mass &lt;= &lt;b&gt;9&lt;/b&gt;" in part
        and "<b>9</b>" not in part
    )
    assert part.count('id="shortlist-shortlist-rings"') == 1
    # the ring markers are <use> elements up to the next named group of the figure
    rings = part.split('<g id="shortlist-shortlist-rings">')[1].split('<g id="')[0]
    assert rings.count("<use") == 2
    body = text.split('<table id="front-table">')[1].split("</table>")[0]
    rows = re.findall(r"<tr[^>]*>(.*?)</tr>", body.split("<tbody>")[1])
    assert len(rows) == len(front)
    assert (
        '<span class="tag">shortlist 1</span>' in rows[5]
        and '<span class="tag">shortlist 2</span>' in rows[1]
    )


def test_shortlist_rows_are_found_by_values_and_a_design_off_the_front_is_refused():
    """A plain table without front_row or eval_id is matched by its objective values, a front_row that
    points at another design falls back to the values, and a design that is not on the front is a DataError."""
    front = small_front()
    plain = front.table.iloc[[7, 3]][["cost", "mass"]].reset_index(drop=True)
    part = _section(build_report(front, shortlist=plain), "shortlist")
    assert re.findall(r"<h3>\d+\. (row \d+)</h3>", part) == ["row 8", "row 4"]
    wrong = plain.assign(front_row=[1, 2])
    part = _section(build_report(front, shortlist=wrong), "shortlist")
    assert re.findall(r"<h3>\d+\. (row \d+)</h3>", part) == ["row 8", "row 4"]
    stranger = pd.DataFrame({"cost": [150.0], "mass": [9.5]})
    with pytest.raises(
        DataError, match=r"shortlist: design 1 \(cost 150, mass 9.5\) is not on this front"
    ):
        build_report(front, shortlist=stranger)
    with pytest.raises(DataError, match="holds no designs"):
        build_report(front, shortlist=plain.iloc[0:0])


@pytest.fixture
def seeds_folder(make_case, tmp_path) -> Path:
    """A run of the invented hostile-title case with three seeds (`run --seeds 3`)."""
    folder = make_case(CASE_TOML.format(title=HOSTILE_TITLE), CASE_MODEL, name="hostile-seeds")
    out = tmp_path / "seeds-run"
    result = CliRunner().invoke(
        main,
        ["run", str(folder), "--seeds", "3", "--evaluations", "300", "--out", str(out), "--quiet"],
    )
    assert result.exit_code == 0, result.output
    return out


def test_seeds_folder_page_shows_the_spread_and_the_attainment_figure(seeds_folder, tmp_path):
    """The review page of a --seeds folder states the median, lowest and highest hypervolume of seeds.csv,
    lists every seed, draws one convergence line per seed and the three attainment surfaces; `plot --kind
    attainment` draws them too, and refuses a single run's folder in one line."""
    runner = CliRunner()
    result = runner.invoke(
        main, ["report", str(seeds_folder), "--out", str(tmp_path / "page.html")]
    )
    assert result.exit_code == 0, result.output
    text = (tmp_path / "page.html").read_text(encoding="utf-8")
    seeds = pd.read_csv(seeds_folder / "seeds.csv")
    hv = seeds["hypervolume"].to_numpy()
    part = _section(text, "run").split('<h3 id="seeds">')[1]
    said = re.search(r"cover ([\d.]+) % \(median\), from ([\d.]+) % to ([\d.]+) %", part)
    assert said is not None, part[:500]
    # as shares of the box from the merged front's best values to the common reference point
    merged = read_front(seeds_folder)
    flags = np.asarray(merged.maximise)
    ideal = np.where(flags, merged.points().max(axis=0), merged.points().min(axis=0))
    box = np.prod(np.abs(np.asarray(merged.reference) - ideal))
    np.testing.assert_allclose(
        [float(v) for v in said.groups()],
        100 * np.array([np.median(hv), hv.min(), hv.max()]) / box,
        atol=0.05,
    )
    seed_table = part.split('<table class="seeds">')[1].split("</table>")[0]
    assert len(re.findall(r"<tr>", seed_table)) == len(seeds) + 1
    assert _facts(text)["independent runs (seeds), merged"] == "3"
    assert all(f'id="history-hypervolume-seed-{seed}"' in text for seed in seeds["seed"])
    for name in ("best", "median", "worst"):
        assert f'id="attainment-attainment-{name}"' in text
    assert "reached by at least 2 of 3 runs" in text
    result = runner.invoke(main, ["plot", str(seeds_folder), "--kind", "attainment"])
    assert result.exit_code == 0, result.output
    with Image.open(seeds_folder / "attainment.png") as image:
        assert image.size[0] > 600
    single = seeds_folder / "seeds" / f"seed-{seeds['seed'].iloc[0]}"
    result = runner.invoke(main, ["plot", str(single), "--kind", "attainment"])
    assert (
        result.exit_code == 2
        and result.output.startswith("Error: ")
        and "--seeds K" in result.output
    )


# ------------------------------------------------------------------------------- headless Chromium
class Chromium:
    """Headless Chromium driven over the DevTools protocol on a pipe (--remote-debugging-pipe)."""

    def __init__(self, executable: str, *, width: int = 1200, height: int = 900) -> None:
        self.profile = tempfile.mkdtemp(prefix="tradewise-chromium-")
        to_chrome_r, self.to_chrome = os.pipe()
        self.from_chrome, from_chrome_w = os.pipe()

        def on_fds_3_and_4() -> None:
            # the protocol pipe is fd 3 (commands in) and fd 4 (replies out) in the browser
            a = fcntl.fcntl(to_chrome_r, fcntl.F_DUPFD, 100)
            b = fcntl.fcntl(from_chrome_w, fcntl.F_DUPFD, 100)
            os.dup2(a, 3)
            os.dup2(b, 4)

        args = [
            executable, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--disable-default-apps", "--mute-audio", f"--user-data-dir={self.profile}",
            "--remote-debugging-pipe", f"--window-size={width},{height}", "about:blank",
        ]  # fmt: skip
        self.process = subprocess.Popen(
            args,
            preexec_fn=on_fds_3_and_4,
            close_fds=False,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        os.close(to_chrome_r)
        os.close(from_chrome_w)
        self.buffer = b""
        self.last_id = 0
        self.events: list[dict] = []
        target = self.call("Target.createTarget", url="about:blank")["targetId"]
        self.session = self.call("Target.attachToTarget", targetId=target, flatten=True)[
            "sessionId"
        ]
        for domain in ("Page", "Network", "Runtime", "Log"):
            self.send(f"{domain}.enable")
        self.send(
            "Emulation.setDeviceMetricsOverride",
            width=width,
            height=height,
            deviceScaleFactor=1,
            mobile=False,
        )

    def _message(self, timeout: float) -> dict:
        while b"\0" not in self.buffer:
            ready, _, _ = select.select([self.from_chrome], [], [], max(timeout, 0.05))
            if not ready:
                raise TimeoutError("chromium gave no answer in time")
            chunk = os.read(self.from_chrome, 1 << 20)
            if not chunk:
                raise EOFError("chromium closed the protocol pipe")
            self.buffer += chunk
        raw, self.buffer = self.buffer.split(b"\0", 1)
        return json.loads(raw)

    def call(self, method: str, *, session: bool = False, timeout: float = 60, **params) -> dict:
        self.last_id += 1
        message = {"id": self.last_id, "method": method, "params": params}
        if session:
            message["sessionId"] = self.session
        os.write(self.to_chrome, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._message(deadline - time.monotonic())
            if reply.get("id") == self.last_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            if "method" in reply:
                self.events.append(reply)

    def send(self, method: str, **params) -> dict:
        return self.call(method, session=True, **params)

    def open(self, path: Path) -> None:
        self.events.clear()
        self.send("Page.navigate", url=path.resolve().as_uri())
        deadline = time.monotonic() + 60
        while not any(e["method"] == "Page.loadEventFired" for e in self.events):
            message = self._message(deadline - time.monotonic())
            if "method" in message:
                self.events.append(message)

    def evaluate(self, expression: str):
        result = self.send(
            "Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True
        )
        if "exceptionDetails" in result:
            raise RuntimeError(result["exceptionDetails"])
        return result["result"].get("value")

    def requested(self) -> list[str]:
        return [
            e["params"]["request"]["url"]
            for e in self.events
            if e["method"] == "Network.requestWillBeSent"
        ]

    def close(self) -> None:
        with contextlib.suppress(OSError, TimeoutError, EOFError, RuntimeError):
            self.call("Browser.close", timeout=10)
        try:
            self.process.wait(timeout=15)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        os.close(self.to_chrome)
        os.close(self.from_chrome)
        shutil.rmtree(self.profile, ignore_errors=True)


def _chromium_executable() -> str | None:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    return None


@pytest.fixture(scope="module")
def browser():
    """One headless Chromium for the module; skipped (or failed where CI requires it) when it is missing."""
    executable = _chromium_executable()
    if executable is None:
        reason = "headless Chromium is not installed (apt-get install -y chromium); the review page was not opened"
        if os.environ.get("TRADEWISE_REQUIRE_BROWSER") == "1":
            pytest.fail(reason)
        pytest.skip(reason)
    chrome = Chromium(executable)
    yield chrome
    chrome.close()


def _local(urls: list[str]) -> list[str]:
    return [u for u in urls if not u.startswith(("file:", "data:"))]


@pytest.mark.browser
def test_page_renders_with_figures_and_shows_the_hostile_title_as_text(
    browser, run_folder, tmp_path
):
    """The screenshot is not blank, each figure has a real size, the title's <script> is text and never ran."""
    page = write_report(
        read_front(run_folder),
        tmp_path / "review.html",
        history=pd.read_csv(run_folder / "history.csv"),
    )
    browser.open(page)
    assert browser.evaluate("document.getElementById('title').textContent") == HOSTILE_TITLE
    assert browser.evaluate("typeof window.__pwned") == "undefined"
    assert browser.evaluate("document.scripts.length") == 1
    sizes = browser.evaluate(
        "Array.from(document.querySelectorAll('figure svg')).map(s => {"
        "const r = s.getBoundingClientRect(); return [r.width, r.height]; })"
    )
    assert len(sizes) == 3
    assert all(w > 500 and h > 300 for w, h in sizes), sizes
    # the figures are drawn: their SVGs hold many painted paths, not an empty box
    painted = browser.evaluate(
        "Array.from(document.querySelectorAll('figure svg')).map(s => s.querySelectorAll('path, use').length)"
    )
    assert min(painted) > 50, painted
    shot = base64.b64decode(
        browser.send("Page.captureScreenshot", format="png", captureBeyondViewport=True)["data"]
    )
    (tmp_path / "review.png").write_bytes(shot)
    with Image.open(io.BytesIO(shot)) as image:
        pixels = np.asarray(image.convert("RGB"), dtype=int)
    assert pixels.shape[0] > 2000  # the whole page, not one screen
    background = pixels[5, 5]
    differs = np.abs(pixels - background).sum(axis=2) > 30
    assert differs.mean() > 0.05
    assert len(np.unique(pixels.reshape(-1, 3)[::97], axis=0)) > 50
    assert _local(browser.requested()) == []


@pytest.fixture
def trap():
    """A local HTTP server that counts every request reaching it (the ground truth of 'a request left the page')."""
    hits: list[str] = []

    class Handler(http.server.BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # noqa: N802 - the name http.server calls
            hits.append(self.path)
            self.send_response(404)
            self.end_headers()

        def log_message(self, *args) -> None:
            pass

    server = http.server.HTTPServer(("127.0.0.1", 0), Handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}", hits
    server.shutdown()
    server.server_close()


def _settle(browser: Chromium, seconds: float = 0.5) -> None:
    # let late subresource requests happen before counting
    browser.evaluate(f"new Promise(r => setTimeout(r, {int(seconds * 1000)}))")


@pytest.mark.browser
def test_no_request_leaves_the_page_even_when_external_content_is_slipped_in(
    browser, trap, tmp_path
):
    """Our page asks for nothing outside itself; an external image slipped into it is blocked by its policy and
    never reaches the server, while the same image on a page without the policy does (so the trap works)."""
    address, hits = trap
    text = build_report(small_front({"title": "Heat sink review"}))
    page = tmp_path / "review.html"
    page.write_text(text, encoding="utf-8")
    browser.open(page)
    _settle(browser)
    assert _local(browser.requested()) == []
    probe = f'<img src="{address}/probe.png" alt="probe"><link rel="stylesheet" href="{address}/probe.css">'
    tampered = tmp_path / "tampered.html"
    tampered.write_text(text.replace("<footer>", probe + "<footer>"), encoding="utf-8")
    browser.open(tampered)
    _settle(browser)
    blocked = [
        e["params"].get("blockedReason")
        for e in browser.events
        if e["method"] == "Network.loadingFailed"
    ]
    assert hits == [] and blocked.count("csp") == 2, blocked
    bare = tmp_path / "bare.html"
    bare.write_text(f"<!DOCTYPE html><html><body>{probe}</body></html>", encoding="utf-8")
    browser.open(bare)
    _settle(browser)
    assert sorted(hits) == ["/probe.css", "/probe.png"]


@pytest.mark.browser
def test_front_table_sorts_with_the_inline_script(browser, tmp_path):
    """Clicking a column heading sorts the rows by that column, then reverses them (the script ran under the policy)."""
    front = small_front()
    page = tmp_path / "review.html"
    page.write_text(build_report(front), encoding="utf-8")
    browser.open(page)
    assert browser.evaluate("document.getElementById('front-table').classList.contains('sortable')")
    column = browser.evaluate(
        "Array.from(document.querySelectorAll('#front-table th')).findIndex(h => h.textContent.startsWith('mass'))"
    )
    assert column >= 2
    read = f"Array.from(document.querySelectorAll('#front-table tbody tr')).map(r => Number(r.cells[{column}].dataset.value))"
    browser.evaluate(f"document.querySelectorAll('#front-table th button')[{column}].click()")
    ascending = browser.evaluate(read)
    assert ascending == sorted(front.table["mass"].tolist())
    browser.evaluate(f"document.querySelectorAll('#front-table th button')[{column}].click()")
    assert browser.evaluate(read) == sorted(front.table["mass"].tolist(), reverse=True)


@pytest.mark.browser
def _print_front(table: pd.DataFrame, variables: list[str]) -> Front:
    return Front.from_table(
        table,
        [Objective("cost", "min", "EUR"), Objective("mass", "min", "kg")],
        variables=variables,
        info=RunInfo(title="Print"),
    )


def _printed(browser, page: Path) -> bytes:
    """The page as Chromium prints it to PDF (print media, the page's own A4 size)."""
    browser.open(page)
    browser.send("Emulation.setEmulatedMedia", media="print")
    try:
        return base64.b64decode(
            browser.send("Page.printToPDF", printBackground=True, preferCSSPageSize=True)["data"]
        )
    finally:
        browser.send("Emulation.setEmulatedMedia", media="")


def test_page_prints_to_a_tidy_pdf(browser, tmp_path):
    """Printed, the whole front table shows (no scroll box), figures keep their size, and the PDF has A4 pages."""
    f1 = np.linspace(0, 1, 120)
    table = pd.DataFrame({"cost": 100 + 900 * f1, "mass": 2 + 8 * (1 - np.sqrt(f1))})
    front = _print_front(table, [])
    page = tmp_path / "review.html"
    page.write_text(build_report(front), encoding="utf-8")
    browser.open(page)
    browser.send("Emulation.setEmulatedMedia", media="print")
    try:
        box = browser.evaluate(
            "(() => { const s = document.querySelector('.scroll'); return [s.clientHeight, s.scrollHeight]; })()"
        )
        assert box[0] >= box[1] - 1  # nothing hidden behind a scroll bar on paper
        pdf = base64.b64decode(
            browser.send("Page.printToPDF", printBackground=True, preferCSSPageSize=True)["data"]
        )
    finally:
        browser.send("Emulation.setEmulatedMedia", media="")
    assert pdf[:5] == b"%PDF-"
    boxes = re.findall(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", pdf)
    assert boxes, "no page boxes in the PDF"
    # A4 is 210 x 297 mm = 595.3 x 841.9 pt (ISO 216)
    assert all(abs(float(w) - 595.3) < 2 and abs(float(h) - 841.9) < 2 for w, h in boxes)
    assert len(boxes) >= 3


def test_printed_tables_repeat_their_headings_and_never_split_a_word(browser, tmp_path):
    """A front table over two printed pages shows its column headings again on the next page as
    text (Chromium leaves a button's text out of a repeated heading row), and a heading breaks only
    after an underscore, never inside a word ('fin_thickness' as 'fin_' and 'thickness')."""
    pdftotext = shutil.which("pdftotext")
    if pdftotext is None:
        reason = (
            "pdftotext is not installed (apt-get install -y poppler-utils); the PDF was not read"
        )
        if os.environ.get("TRADEWISE_REQUIRE_BROWSER") == "1":
            pytest.fail(reason)
        pytest.skip(reason)
    f1 = np.linspace(0, 1, 60)
    table = pd.DataFrame(
        {
            "cost": 100 + 900 * f1,
            "mass": 2 + 8 * (1 - np.sqrt(f1)),
            "fin_thickness": 0.8 + f1,
            "base_temperature": 60 + 20 * f1,
        }
    )
    page = tmp_path / "review.html"
    page.write_text(
        build_report(_print_front(table, ["fin_thickness", "base_temperature"])), encoding="utf-8"
    )
    pdf = _printed(browser, page)
    (tmp_path / "review.pdf").write_bytes(pdf)
    text = subprocess.run(
        [pdftotext, "-layout", str(tmp_path / "review.pdf"), "-"],
        capture_output=True, text=True, check=True,
    ).stdout  # fmt: skip
    # a table row: 'row N' or a design number, then numbers; its page must show the headings
    row = re.compile(r"^\s*(row )?\d+\s+.*\d\.\d+\s+\d+\.\d+\s*$", re.M)
    with_rows = [page for page in text.split("\f") if len(row.findall(page)) >= 5]
    assert len(with_rows) >= 2, "the front table should run over at least two pages"
    for printed in with_rows:
        assert re.search(r"^\s*design\s", printed, re.M), "table rows printed without headings"
        assert re.search(r"thickness\b", printed) and re.search(r"temperature\b", printed)
        assert not re.search(r"\b(desi|thick|temper|tempera)\s*$", printed, re.M)


# ------------------------------------------------------------------------------- templates and escaping
MARK = "<i>\"'&amp;"
MARK_ESCAPED = html.escape(MARK, quote=True)  # &lt;i&gt;&quot;&#x27;&amp;amp;


def test_every_text_from_the_case_and_the_tables_is_escaped_on_the_page():
    """User text in every field the page shows (title, description, cautions, names, units, options,
    run facts, table cells, shortlist settings, seed status) comes out escaped as html.escape does it,
    and no markup of it survives, also inside the figures."""
    meta = {
        "title": f"Bracket {MARK}",
        "description": f"About {MARK}",
        "cautions": f"Mind {MARK}",
        "message": f"Stopped {MARK}",
        "algorithm": f"NSGA-II {MARK}",
        "stop_reason": f"budget {MARK}",
        "reference_source": f"from {MARK}",
        "case_file": f"case {MARK}.toml",
        "case_hash": MARK,
        "versions": {"tradewise": MARK},
        "design_space": [
            {"name": f"t{MARK}", "type": "choice", "options": [MARK, "b"], "unit": MARK}
        ],
        "constraint_limits": [{"name": f"gap{MARK}", "min": 1.0, "unit": MARK}],
    }
    front = small_front(meta)
    table = front.table.assign(note=[f"n{k}{MARK}" for k in range(len(front))])
    front = Front(table=table, objectives=front.objectives, units={**front.units, "t": MARK},
                  variables=front.variables, reference=front.reference, info=front.info)  # fmt: skip
    shortlist = Front(table=table.iloc[[3]], objectives=front.objectives, units=front.units,
                      info=RunInfo(shortlist={"method": MARK, "limits": [MARK]}))  # fmt: skip
    seeds = pd.DataFrame({"seed": [1, 2], "status": [MARK, "done"], "hypervolume": [1.0, 2.0]})
    text = build_report(front, shortlist=shortlist, seeds=seeds)
    assert "<i>" not in text and "&lt;i&gt;&#34;" not in text
    for needed in ("Bracket", "About", "Mind", "Stopped", "NSGA-II", "budget", "from", "n0", "n20"):
        assert f"{needed} {MARK_ESCAPED}" in text or f"{needed}{MARK_ESCAPED}" in text, needed
    assert text.count(MARK_ESCAPED) >= 40


def test_style_and_script_are_the_package_files_and_the_policy_hashes_the_script():
    """The page inlines templates/review.css and templates/sort.js unchanged, and its policy allows
    exactly that script by its SHA-256 (the browser test shows the script then runs)."""
    import hashlib
    from importlib.resources import files

    folder = files("tradewise") / "templates"
    css = (folder / "review.css").read_text(encoding="utf-8").rstrip("\n")
    script = (folder / "sort.js").read_text(encoding="utf-8").rstrip("\n")
    text = build_report(small_front())
    assert f"<style>\n{css}\n</style>" in text
    assert re.findall(r"<script>(.*?)</script>", text, flags=re.S) == [script]
    digest = base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")
    assert f"script-src 'sha256-{digest}'" in text


def test_only_the_figures_are_marked_safe_in_the_templates():
    """No template writes a value unescaped except the SVG figure macro; report.py builds no Markup of its own
    beyond the escaping hook."""
    from importlib.resources import files

    import tradewise.report

    folder = Path(str(files("tradewise") / "templates"))
    sources = {p.name: p.read_text(encoding="utf-8") for p in folder.rglob("*.j2")}
    assert "review.html.j2" in sources and len(sources) >= 3
    unsafe = {
        name: re.findall(r"\{\{[^}]*\|\s*safe[^}]*\}\}", source)
        for name, source in sources.items()
        if re.search(r"\|\s*safe|autoescape\s+false", source)
    }
    assert unsafe == {"macros.html.j2": ["{{ svg|safe }}"]}
    code = Path(tradewise.report.__file__).read_text(encoding="utf-8")
    assert code.count("Markup(") == 1 and "Markup(escape(str(value), quote=True))" in code


def test_a_design_has_one_number_in_pick_the_shortlist_file_and_the_page(tmp_path):
    """The design pick chooses on a run folder is named by its eval_id in pick's text, the exported
    shortlist, the review page's shortlist and its table of the whole front."""
    import shutil

    folder = tmp_path / "run"
    shutil.copytree(Path(__file__).parent / "fixtures" / "runs" / "mixed", folder)
    runner = CliRunner()
    picked = runner.invoke(main, ["pick", str(folder), "--out", str(tmp_path / "short.csv")])
    assert picked.exit_code == 0, picked.output
    number = re.search(r"^Choice 1: design (\d+)$", picked.output, re.M).group(1)
    exported = pd.read_csv(tmp_path / "short.csv")
    assert str(exported["eval_id"].iloc[0]) == number
    page = runner.invoke(
        main, ["report", str(folder), "--shortlist", str(tmp_path / "short.csv"),
               "--out", str(tmp_path / "page.html")],
    )  # fmt: skip
    assert page.exit_code == 0, page.output
    text = (tmp_path / "page.html").read_text(encoding="utf-8")
    assert f"<h3>1. design {number}</h3>" in _section(text, "shortlist")
    table = text.split('<table id="front-table">')[1].split("</table>")[0]
    tagged = [
        row for row in re.findall(r"<tr[^>]*>(.*?)</tr>", table, re.S) if "shortlist 1" in row
    ]
    assert len(tagged) == 1 and f'data-value="{number}">{number}</td>' in tagged[0]


def test_a_two_objective_front_without_variables_has_no_parallel_figure():
    """Two objectives and no variable: the page leaves parallel coordinates out (two axes alone say less
    than the scatter) and keeps the front figure; with its variable the same front gets the figure."""
    front = small_front()
    bare = front.with_table(front.table[["cost", "mass"]])
    page = build_report(bare)
    assert 'id="front-' in page and 'id="parallel-' not in page
    assert 'id="parallel-' in build_report(front)

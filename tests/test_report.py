"""The report page's content, read back from the HTML with the standard library's parser.

The page is checked against the files it reports on: every row of
``summary.json`` appears in the results table with exactly the summary's
values (the cells carry the JSON value in ``data-v``); every failed pair's
message, every tolerance-band failure and every warning appears; verdicts are
told by word and shape; nothing on the page points outside it; headings go in
order and figures have alt text (WCAG 2.1, success criteria 1.1.1 "Non-text
Content" and 1.3.1 "Info and Relationships"; criteria numbers from memory).
"""

from __future__ import annotations

import json
import os
import re
from html.parser import HTMLParser

import pytest
from click.testing import CliRunner
from report_cases import make_batch, make_tolerance

from simwave.cli import main
from simwave.report import write_report
from simwave.report.study import load_folder
from simwave.report.values import Cell, cell_text, null_reasons_in, read_cell


class PageParser(HTMLParser):
    """Collects what the tests look at: headings, the results table, figures, links, sections."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.headings: list[tuple[int, str]] = []
        self.table_cols: list[str] = []
        self.table_rows: list[list[dict]] = []
        self.svgs: list[dict] = []
        self.urls: list[tuple[str, str, str]] = []
        self.scripts: list[dict] = []
        self.metas: list[dict] = []
        self.uses: list[str] = []
        self._stack: list[str] = []
        self._in_table = False
        self._in_heading: int | None = None
        self._text: list[str] = []
        self._section: list[str] = []
        self.section_text: dict[str, list[str]] = {}

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag in ("section",) and a.get("id"):
            self._section.append(a["id"])
        elif tag == "section":
            self._section.append(self._section[-1] if self._section else "")
        if tag in ("h1", "h2", "h3", "h4", "h5", "h6"):
            self._in_heading = int(tag[1])
            self._text = []
        if tag == "table" and a.get("id") == "rows-table":
            self._in_table = True
        if self._in_table and tag == "th" and a.get("data-col"):
            self.table_cols.append(a["data-col"])
        if self._in_table and tag == "tr" and "data-verdict" in a:
            self.table_rows.append([])
            self._row_verdict = a["data-verdict"]
        if self._in_table and tag == "td" and self.table_rows:
            self.table_rows[-1].append(a)
        if tag == "svg":
            self.svgs.append(a)
        if tag == "use":
            self.uses.append(a.get("href", ""))
        if tag == "script":
            self.scripts.append(a)
        if tag == "meta":
            self.metas.append(a)
        for key in ("href", "src", "action", "xlink:href"):
            if a.get(key):
                self.urls.append((tag, key, a[key]))

    def handle_endtag(self, tag):
        if tag == "table" and self._in_table:
            self._in_table = False
        if self._in_heading and tag == f"h{self._in_heading}":
            self.headings.append((self._in_heading, "".join(self._text).strip()))
            self._in_heading = None
        if tag == "section" and self._section:
            self._section.pop()

    def handle_data(self, data):
        if self._in_heading:
            self._text.append(data)
        if self._section:
            self.section_text.setdefault(self._section[0], []).append(data)


def parse(text: str) -> PageParser:
    p = PageParser()
    p.feed(text)
    return p


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    result = make_batch(str(folder))
    path = write_report(result)
    with open(path, encoding="utf-8") as fh:
        page = fh.read()
    with open(result.summary_json, encoding="utf-8") as fh:
        summary = json.load(fh)
    return result, path, page, summary


def test_table_rows_match_summary_json_exactly(batch):
    _, _, page, summary = batch
    p = parse(page)
    rows = summary["rows"]
    assert len(p.table_rows) == len(rows) == 6
    cols = [c for c in p.table_cols if c != "verdict"]
    # every column that has a value in some row is in the table; the others are empty everywhere
    for c in summary["columns"]:
        if any(r.get(c) not in (None, "") for r in rows):
            assert c in cols, c
    for row, cells in zip(rows, p.table_rows, strict=True):
        by_col = dict(zip(p.table_cols, cells, strict=True))
        for c in cols:
            assert json.loads(by_col[c]["data-v"]) == row[c], (row["input"], row["system"], c)


def test_every_failure_warning_and_band_failure_appears(batch):
    result, _, page, summary = batch
    p = parse(page)
    problems = " ".join(p.section_text["problems"])
    failed = [r for r in summary["rows"] if r["status"] == "failed"]
    assert len(failed) == 2  # the broken CSV, with each system
    for r in failed:
        assert r["error"] and r["error"] in problems
    band_failures = [r for r in summary["rows"] if str(r["limits"]).startswith("fail")]
    assert len(band_failures) == 1
    for r in band_failures:
        assert r["limits"] in problems
    warnings = {w for r in summary["rows"] if r["warnings"] for w in r["warnings"].split(" | ")}
    assert warnings  # the first-order system's pole above Nyquist
    for w in warnings:
        assert w in problems


def test_verdicts_by_word_and_shape(batch):
    _, _, page, _ = batch
    p = parse(page)
    verdicts = [cells[p.table_cols.index("verdict")]["data-s"] for cells in p.table_rows]
    assert sorted(set(verdicts)) == ["fail", "not measured", "pass", "run failed"]
    # each verdict word sits beside its own shape; pass, fail and not measured differ in shape
    pairs = re.findall(r'<use href="#(i-[a-z]+)"/></svg><span[^>]*>([a-z ]+)</span>', page)
    by_word: dict[str, set] = {}
    for icon, word in pairs:
        by_word.setdefault(word, set()).add(icon)
    assert all(len(icons) == 1 for icons in by_word.values())  # one shape per word
    assert len(set.union(by_word["pass"], by_word["fail"], by_word["not measured"])) == 3
    for icon in ("i-pass", "i-fail", "i-none"):
        assert f'<symbol id="{icon}"' in page


def test_nothing_is_fetched(batch):
    _, _, page, _ = batch
    p = parse(page)
    for _tag, _key, url in p.urls:
        assert url.startswith(("#", "data:")) or not re.match(r"^[a-z][a-z0-9+.-]*:", url), url
        assert not url.startswith("//"), url
    assert all("src" not in s for s in p.scripts)
    assert "<link rel=\"stylesheet\"" not in page and "@import" not in page
    assert not re.search(r"url\((?!#)", page)  # CSS or SVG references other than in-page ids
    csp = next(m["content"] for m in p.metas if m.get("http-equiv") == "Content-Security-Policy")
    assert "default-src 'none'" in csp
    # the one script is allowed by its hash, so the policy really lets it run
    import base64
    import hashlib

    script = re.search(r"<script>(.*?)</script>", page, re.S).group(1)
    digest = base64.b64encode(hashlib.sha256(script.encode()).digest()).decode()
    assert f"'sha256-{digest}'" in csp


def test_headings_in_order_and_figures_have_alt_text(batch):
    result, _, page, _ = batch
    p = parse(page)
    levels = [lvl for lvl, _ in p.headings]
    assert levels[0] == 1 and levels.count(1) == 1
    for before, after in zip(levels, levels[1:], strict=False):
        assert after <= before + 1, p.headings
    figures = [s for s in p.svgs if s.get("role") == "img"]
    ok_pairs = sum(1 for r in result.results.values() if r["status"] == "ok")
    systems = 2
    assert len(figures) == ok_pairs + systems  # an overlay per pair, a response per model
    assert all(len(s.get("aria-label", "")) > 40 for s in figures)
    # element ids of the inline figures do not collide
    ids = re.findall(r'\sid="([^"]+)"', page)
    assert len(ids) == len(set(ids))


def test_cautions_are_on_the_page(batch):
    _, _, page, _ = batch
    text = " ".join(parse(page).section_text["cautions"])
    assert "applicable standards and licensed engineering practice" in text
    assert "loud" in text.lower() and "low volume" in text


def test_folder_report_matches_the_report_written_after_the_batch(batch):
    result, path, page, _ = batch
    study = load_folder(os.path.dirname(path))
    with open(result.summary_json, encoding="utf-8") as fh:
        assert study.rows == json.load(fh)["rows"]
    assert [p.source for p in study.pairs if p.status == "ok"] == [
        p.input.source for p in result.plan.pairs
        if result.results[p.index]["status"] == "ok"]


def test_large_batch_draws_the_worst_cases_and_links_the_rest(batch, tmp_path):
    result, _, _, summary = batch
    out = write_report(result, str(tmp_path / "small.html"), max_detailed=1)
    with open(out, encoding="utf-8") as fh:
        page = fh.read()
    p = parse(page)
    sections = re.findall(r'<section class="pair" id="(pair-\d+)"', page)
    assert len(sections) == 1
    worst = summary["comparison"]["underdamped"]["overshoot_pct_worst"]["input"]
    drawn = re.search(r'<section class="pair" id="pair-\d+".*?</section>', page, re.S).group(0)
    assert f"<h3 id=\"h-{sections[0]}\">{worst} \u00d7 underdamped</h3>" in drawn
    others = " ".join(p.section_text["pairs"])
    assert "Other pairs" in others
    metrics_links = [u for _, _, u in p.urls if u.endswith(".metrics.json")]
    ok_pairs = [r for r in result.results.values() if r["status"] == "ok"]
    assert len({u for u in metrics_links}) == len(ok_pairs)
    for u in metrics_links:
        assert os.path.isfile(os.path.join(str(tmp_path), u)), u


# ----------------------------------------------------------------------------- values
def test_bounds_and_reasons_read_generically():
    assert cell_text(read_cell({"x_s": {"value": 0.18, "bound": "lower"}}, "x_s"), "s") == \
        "\u2265 180 ms"
    c = read_cell({"x_s": 0.5, "x_s_bound": "upper", "x_s_reason": "record ends"}, "x_s")
    assert (c.bound, c.reason, cell_text(c, "s")) == ("upper", "record ends", "\u2264 500 ms")
    c = read_cell({"x": None, "null_reasons": {"x": "too noisy"}}, "x")
    assert c.missing and c.reason == "too noisy" and cell_text(c) == "n/a"
    # a reason in the metrics file, found under the column's base name
    c = read_cell({"final_value": None, "kind": "transitions", "transitions": 2},
                  "final_value", {"final_value": "window holds a transition"})
    assert c.reason == "window holds a transition"
    c = read_cell({"gain_db": None, "kind": "transitions", "transitions": 3}, "gain_db")
    assert c.reason.startswith("not measured")
    # no reason anywhere: none invented
    assert read_cell({"odd": None, "status": "ok"}, "odd").reason is None
    assert Cell(1.0, 1.0).missing is False


def test_null_reasons_found_anywhere_under_a_channel():
    ch = {"steady_state": {"null_reasons": {"final_value": "a"}},
          "transitions": [{"null_reasons": {"overshoot_pct": "b"}},
                          {"null_reasons": {"overshoot_pct": "b"}}]}
    found = null_reasons_in(ch)
    assert found["final_value"] == "a"
    assert found["overshoot_pct"] == "b (2 places)"


def test_bounds_show_on_the_page(batch, tmp_path):
    result, _, _, _ = batch
    from simwave.report.page import render
    from simwave.report.study import from_batch

    study = from_batch(result, str(tmp_path))
    row = next(r for r in study.rows if r["status"] == "ok" and r["kind"] == "transitions")
    row["settling_time_s_longest"] = {"value": 0.25, "bound": "lower",
                                      "reason": "still moving at the end of the record"}
    page = render(study, figures=False)
    assert "\u2265 250 ms" in page and "still moving at the end of the record" in page


# ----------------------------------------------------------------------------- commands
def test_report_command(batch, tmp_path):
    result, _, _, _ = batch
    out = tmp_path / "page.html"
    r = CliRunner().invoke(main, ["report", result.plan.output_dir, "-o", str(out)])
    assert r.exit_code == 0, r.output
    assert out.stat().st_size > 10_000 and "wrote" in r.output


@pytest.mark.parametrize("args, words", [
    (["{empty}"], "no summary.json"),
    (["{batch}", "-o", "{tmp}/page.txt"], "use a file name ending in .html"),
    (["{batch}", "-o", "{tmp}/missing/page.html"], "does not exist"),
    (["{tmp}/nothing-here"], "not a folder"),
])
def test_report_command_errors_are_one_line(batch, tmp_path, args, words):
    result, _, _, _ = batch
    (tmp_path / "empty").mkdir()
    args = [a.format(empty=tmp_path / "empty", batch=result.plan.output_dir, tmp=tmp_path)
            for a in args]
    r = CliRunner().invoke(main, ["report", *args])
    assert r.exit_code == 2
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and words in lines[0], r.output
    assert not list(tmp_path.glob("**/*.html")) and not list(tmp_path.glob("**/.*part*"))


def test_run_and_batch_write_a_report(tmp_path):
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    src = os.path.join(here, "waveforms", "strain-step.csv")
    system = os.path.join(here, "examples", "strain_gauge_front_end.toml")
    page = tmp_path / "out.report.html"
    r = CliRunner().invoke(main, ["run", src, "-s", system, "-o", str(tmp_path / "out.csv"),
                                  "--report"])
    assert r.exit_code == 0, r.output
    text = page.read_text(encoding="utf-8")
    assert "strain-step.csv" in text and 'role="img"' in text
    r = CliRunner().invoke(main, ["batch", "-s", "2*pi*50/(s+2*pi*50)",
                                  "step:rate=2k,duration=0.1,time=10m", "-o",
                                  str(tmp_path / "b"), "-j", "1", "--report"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "b" / "report.html").is_file() and "report:" in r.output
    # a report that cannot be written is refused before any work is done
    r = CliRunner().invoke(main, ["run", src, "-s", system, "-o",
                                  str(tmp_path / "missing" / "x.csv"), "--report"])
    assert r.exit_code == 2 and "does not exist" in r.output
    assert not (tmp_path / "missing").exists()


# ----------------------------------------------------------------------------- size
SIXTY_PAIRS_TOML = """
[batch]
jobs = 2

[output]
dir = "results"

[systems.bessel4]
design = { family = "bessel-magnitude", kind = "lowpass", order = 4, cutoff_hz = "200" }
[systems.butterworth4]
design = { family = "butterworth", kind = "lowpass", order = 4, cutoff_hz = "200" }
[systems.chebyshev4]
design = { family = "chebyshev1", kind = "lowpass", order = 4, cutoff_hz = "200", ripple_db = 1 }

[[inputs]]
signal = [{signals}]
"""


@pytest.mark.slow
def test_sixty_pair_report_stays_under_10_mb(tmp_path):
    # 3 candidate filters x 20 recordings, as in a typical comparison: 0.5 s records at
    # 10 kHz (5000 samples), pulse trains of different widths and noisy steps.
    from simwave.batch import load_description, run_batch

    signals = [f'"pulse-train:rate=10k,duration=0.5,width={w}m,period={2 * w}m,count=3,'
               f'delay=20m,edge=1m"' for w in range(40, 80, 4)]
    signals += [f'"step:rate=10k,duration=0.5,time={t}m"' for t in range(20, 120, 10)]
    (tmp_path / "batch.toml").write_text(
        SIXTY_PAIRS_TOML.replace("{signals}", ", ".join(signals)), encoding="utf-8")
    result = run_batch(load_description(str(tmp_path / "batch.toml")))
    assert result.counts == {**result.counts, "pairs": 60, "ok": 60}
    path = write_report(result)
    size = os.path.getsize(path)
    print(f"60-pair report: {size / 1e6:.2f} MB")
    assert size < 10e6
    with open(path, encoding="utf-8") as fh:
        page = fh.read()
    assert page.count('<section class="pair"') == 60  # every pair drawn in full


def test_bounds_and_reasons_as_the_key_metrics_write_them():
    # key_metrics writes which values are bounds and why others are missing as text columns
    row = {"settling_time_s_longest": 0.4, "bounds": "settling_time_s_longest lower",
           "gain_db": None, "missing": "gain_db: no sine found in the record", "status": "ok"}
    c = read_cell(row, "settling_time_s_longest")
    assert c.bound == "lower" and cell_text(c, "s") == "\u2265 400 ms"
    assert read_cell(row, "gain_db").reason == "no sine found in the record"
    both = read_cell({"x": 2.0, "bounds": "x lower and upper"}, "x")
    assert cell_text(both) == "~ 2"


# ----------------------------------------------------------------------------- tolerance
def test_tolerance_report_rows_and_problem_builds(tmp_path):
    result = make_tolerance(str(tmp_path))
    r = CliRunner().invoke(main, ["report", str(tmp_path)])  # the study folder is one down
    assert r.exit_code == 0, r.output
    out_dir = result.study.output_dir
    with open(os.path.join(out_dir, "report.html"), encoding="utf-8") as fh:
        page = fh.read()
    with open(os.path.join(out_dir, "tolerance-summary.json"), encoding="utf-8") as fh:
        summary = json.load(fh)
    p = parse(page)
    rows = summary["model"] + summary["metrics"]
    assert len(p.table_rows) == len(rows)
    for row, cells in zip(rows, p.table_rows, strict=True):
        by_col = dict(zip(p.table_cols, cells, strict=True))
        for c in p.table_cols:
            if c != "verdict":
                assert json.loads(by_col[c]["data-v"]) == row.get(c), (row["metric"], c)
    problems = " ".join(p.section_text["problems"])
    assert summary["problem_builds"]
    for b in summary["problem_builds"]:
        assert b["reason"] in problems and b["status"] in problems
    # the limited metric: its unstable and improper corners do not meet it (the study
    # counts them as not meeting), so the row fails, and says how many builds
    final = next(i for i, r in enumerate(rows) if r["metric"] == "final_value"
                 and r["input"] == "step")
    assert summary["all_limits"]["meeting"] < summary["all_limits"]["builds"]
    assert p.table_rows[final][p.table_cols.index("verdict")]["data-s"] == "fail"
    caution = " ".join(p.section_text["cautions"])
    assert "covers only the parameters and distributions given" in caution
    figures = re.findall(r'<img src="data:image/png;base64,[^"]+" alt="([^"]+)"', page)
    assert len(figures) == len([f for f in os.listdir(out_dir) if f.endswith(".png")]) >= 1

"""tracer run and the HTML report: sections, findings first, inline figures, no network, escaped corpus
text, parts not measured, and the layout measured in a real browser."""

import base64
import gzip
import html as html_text
import importlib.util
import json
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from markupsafe import escape
from scipy import stats

from tracer.app.cli import cli
from tracer.provenance.experiment import load_experiment
from tracer.app.pipeline import find_run, run_experiment

ROOT = Path(__file__).resolve().parents[2]
_spec = importlib.util.spec_from_file_location("gen", ROOT / "corpora_demo" / "generate_demo_corpus.py")
gen = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(gen)
SCRIPT = "<script>alert(1)</script>"


def _experiment(drift_by: str) -> str:
    return f"""
[corpus]
inputs = ["small.jsonl.gz"]
workspace = "ws"
[models]
# dim 100, the default: at dim 50 the combined hostile document below fell out of the top 20
ppmi_svd = {{ dim = 100 }}
[measure]
tests = "tests.toml"
by = ["source"]
bootstrap = 2
# the smallest source of this small corpus lacks some test words: each slice keeps its own words
per_slice_words = true
[trace]
tests = ["gazette_outlet"]
verify = 2
[drift]
tests = ["tribune_mix"]
by = "{drift_by}"
bootstrap = 2
"""


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("run")
    docs, planted = gen.generate(77, docs_per_year=12)
    # a strongly planted document whose text carries markup inside its passages: eight of the Gazette's
    # planted documents in one, so that it leads the trace, with the markup between its sentences
    texts = {d["id"]: d["text"] for d in docs}
    body = " ".join([texts[d] for d, a in planted if a == "outlet_gazette"][:16])
    docs.append({"id": "hostile-1", "source": "Gazette", "date": "1990-01-01", "title": "Hostile <b>title</b>",
                 "text": body.replace(". ", f". {SCRIPT} ")})
    with gzip.open(folder / "small.jsonl.gz", "wt", encoding="utf-8") as f:
        f.writelines(json.dumps(d) + "\n" for d in docs)
    shutil.copyfile(ROOT / "configs" / "demo_tests.toml", folder / "tests.toml")
    (folder / "exp.toml").write_text(_experiment("time:20y"), encoding="utf-8")
    result = run_experiment(load_experiment(folder / "exp.toml"))
    assert not result.reused
    return result.folder


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.imgs, self.urls, self.scripts = [], [], [], 0

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        if tag == "script":
            self.scripts += 1
        for k in ("src", "href"):
            if a.get(k, "").startswith(("http:", "https:", "//")):
                self.urls.append(a[k])


def test_report_has_every_section_inline_figures_and_no_network(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    p = _Collect()
    p.feed(html)
    assert {"corpus", "tests", "trace", "drift", "methods", "cautions", "reproduce"} <= set(p.ids)
    assert len(p.imgs) >= 6 and all(src.startswith("data:image/png;base64,") for src in p.imgs)
    assert p.urls == [] and "http://" not in html and "https://" not in html
    assert "not proof of discrimination" in html and "qualified reviewers and the applicable law" in html


def test_corpus_text_is_escaped(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    assert SCRIPT not in html and "<b>title</b>" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    p = _Collect()
    p.feed(html)
    assert p.scripts == 0


def test_run_folder_holds_tables_config_and_provenance(run_dir):
    info = json.loads((run_dir / "run.json").read_text())
    assert {"run_id", "experiment_hash", "corpus_hash", "versions", "seeds", "command"} <= set(info)
    assert (run_dir / "experiment.toml").is_file()
    figures = sorted((run_dir / "figures").glob("*.png"))
    assert len(figures) >= 6 and all(f.read_bytes()[:4] == b"\x89PNG" for f in figures)
    for name in ("measure", "trace_gazette_outlet_sources", "drift_tribune_mix_changes"):
        assert (run_dir / "tables" / f"{name}.csv").is_file() and (run_dir / "tables" / f"{name}.json").is_file()


def test_an_unchanged_run_is_reused_and_report_rewrites(run_dir, tmp_path):
    exp = load_experiment(run_dir.parent.parent.parent / "exp.toml")
    again = run_experiment(exp)
    assert again.reused and again.folder == run_dir
    assert find_run(exp.workspace) == run_dir
    res = CliRunner().invoke(cli, ["report", "-w", str(exp.workspace), "--run", "latest", "-o", str(tmp_path / "r.html")])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "r.html").read_text() == (run_dir / "report.html").read_text()


def test_report_opens_in_a_headless_browser(run_dir, tmp_path):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed and could not be installed here (.ci/run tries apt-get)")
    shot = tmp_path / "shot.png"
    res = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                          "--disable-component-update", "--no-first-run", "--disable-sync",
                          f"--user-data-dir={tmp_path / 'profile'}", "--enable-logging=stderr", "--v=0",
                          "--window-size=1200,2000", f"--screenshot={shot}", (run_dir / "report.html").as_uri()],
                         capture_output=True, text=True, timeout=120)
    assert shot.is_file(), res.stderr[-2000:]
    import matplotlib.image as mpimg
    img = mpimg.imread(shot)
    assert img.shape[0] > 500 and img[..., :3].std() > 0.05  # not a blank page
    console_errors = [line for line in res.stderr.splitlines() if "CONSOLE" in line and "rror" in line]
    assert console_errors == []


def test_a_changed_experiment_reuses_cached_counts_and_models(run_dir):
    folder = run_dir.parent.parent.parent
    text = (folder / "exp.toml").read_text(encoding="utf-8")
    (folder / "exp2.toml").write_text(text.replace("verify = 2", "verify = 3"), encoding="utf-8")
    again = run_experiment(load_experiment(folder / "exp2.toml"))
    assert not again.reused and again.folder != run_dir
    info = json.loads((again.folder / "run.json").read_text())
    assert info["cache"]["hits"] > 10  # every slice's counts and model came from the cache
    first = json.loads((run_dir / "tables" / "measure.json").read_text())
    second = json.loads((again.folder / "tables" / "measure.json").read_text())
    assert [r["effect_size"] for r in first] == [r["effect_size"] for r in second]


def test_other_commands_read_the_cache_and_store_nothing(run_dir, tmp_path, monkeypatch):
    from tracer.provenance.cache import ResultCache
    from tracer.core.counting import CountSettings
    from tracer.provenance.counts import count_slice
    from tracer.corpus.slices import slice_from_spec
    from tracer.provenance.cache import open_workspace

    ws_path = run_dir.parent.parent
    entries = sorted(p.name for p in (ws_path / "cache").iterdir())
    ws = open_workspace(ws_path, cache="read")
    sl = slice_from_spec(ws, "all")
    count_slice(ws, sl.weights, CountSettings())
    assert (ws.cache.hits, ws.cache.misses) == (1, 0)  # the run counted this slice
    src = ws.documents["source"].to_numpy()
    count_slice(ws, sl.weights * ~((src == "Herald") | (src == "Ledger")), CountSettings())
    assert ws.cache.misses == 1
    args = ["trace", "--tests", str(ws_path.parent / "tests.toml"), "--test", "gazette_outlet", "--dim", "100",
            "--format", "json"]
    found = []
    get = ResultCache.get_embedding
    monkeypatch.setattr(ResultCache, "get_embedding", lambda self, key: found.append(get(self, key)) or found[-1])
    cached = CliRunner().invoke(cli, args[:1] + ["-w", str(ws_path)] + args[1:])
    assert cached.exit_code == 0, cached.output
    assert found and found[0] is not None  # the trace used the run's model of the slice
    assert sorted(p.name for p in (ws_path / "cache").iterdir()) == entries  # nothing stored
    plain = tmp_path / "ws"
    shutil.copytree(ws_path, plain, ignore=shutil.ignore_patterns("cache", "runs"))
    fresh = CliRunner().invoke(cli, args[:1] + ["-w", str(plain)] + args[1:])
    assert fresh.exit_code == 0 and json.loads(fresh.stdout) == json.loads(cached.stdout)


def test_cache_keys_change_with_the_tracer_version(monkeypatch):
    import tracer.provenance.cache
    from tracer.provenance.cache import ResultCache
    w = np.ones(4)
    before = ResultCache.key("abc", w, "counts", {"window": 5})
    assert ResultCache.key("abc", w, "counts", {"window": 5}) == before
    monkeypatch.setattr(tracer.provenance.cache, "__version__", "9.9.9")
    assert ResultCache.key("abc", w, "counts", {"window": 5}) != before


def _rows_of(html: str, table_id_or_section: str) -> str:
    start = html.index(f'id="{table_id_or_section}"')
    return html[start:html.index("</section>", start)]


def test_findings_come_first_and_name_source_verification_and_drift(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    assert html.index('id="findings"') < html.index('id="cautions"') < html.index('id="corpus"')
    findings = _rows_of(html, "findings")
    measure = pd.DataFrame(json.loads((run_dir / "tables" / "measure.json").read_text()))
    row = measure[(measure.test == "gazette_outlet") & (measure.slice == "all")].iloc[0]
    assert f"d {row.effect_size:.2f} [{row.ci_low:.2f}, {row.ci_high:.2f}]" in findings
    src = pd.DataFrame(json.loads((run_dir / "tables" / "trace_gazette_outlet_sources.json").read_text()))
    top = src.sort_values("contribution_gap").iloc[0]  # the gap is positive: the most negative change carries it
    assert top.source == "Gazette" and f"Gazette: {top.contribution_gap:+.3g}" in findings
    ver = pd.DataFrame(json.loads((run_dir / "tables" / "trace_gazette_outlet_verification.json").read_text()))
    assert f"rho {ver.spearman_rho.iloc[0]:.2f}" in findings
    ch = pd.DataFrame(json.loads((run_dir / "tables" / "drift_tribune_mix_changes.json").read_text()))
    overall = ch[ch.overall].iloc[0]
    phrase = ("in the mix of sources" if overall.mix_share >= 2 / 3 else
              "within the sources" if overall.mix_share <= 1 / 3 else "both mix and sources")
    assert f"{phrase}: mix {overall.mix_part:+.2g}" in findings
    for kind in ("test", "trace", "drift"):  # every link of the findings leads to an id in the page
        for target in set(re.findall(rf'href="#({kind}-[^"]+)"', findings)):
            assert f'id="{target}"' in html


def test_verification_states_rank_agreement_as_scipy_computes_it(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    ver = pd.DataFrame(json.loads((run_dir / "tables" / "trace_gazette_outlet_verification.json").read_text()))
    # reference: scipy's Spearman rho over the estimated and retrained changes of every retrain
    rho = stats.spearmanr(ver.predicted, ver.actual).statistic
    signs = np.mean(np.sign(ver.predicted) == np.sign(ver.actual))
    assert f"Spearman rho {rho:.2f} (rank agreement), signs agree in {100 * signs:.0f}%" in html
    assert 'alt="Verification of gazette_outlet"' in html


def test_tables_print_counts_as_integers_and_warnings_once_as_footnotes(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    tests = _rows_of(html, "tests")
    assert not re.search(r">\d+\.0000<", html)  # counts never as 6.0000
    measure = pd.DataFrame(json.loads((run_dir / "tables" / "measure.json").read_text()))
    warning = next(w for w in measure.warning if isinstance(w, str) and w)
    block = tests[tests.index("<h3", tests.index(">gazette_outlet<") - 80):]
    block = block[:block.index("<h3", 10)]
    assert block.count(str(escape(warning))) <= 1
    assert "<th>notes</th>" in block and "ppmi-svd" not in block.split("<table>")[1].split("</thead>")[0]


def test_experiment_block_shows_the_paths_as_resolved(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    table = html[html.index('id="experiment"'):]
    table = table[:table.index("</table>")]
    info = json.loads((run_dir / "run.json").read_text())
    assert f"<td>{info['experiment']['workspace']}</td>" in table  # absolute, where the file says "ws"
    assert Path(info["experiment"]["workspace"]).is_absolute()


def test_figure_files_are_the_report_figures_in_order(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    p = _Collect()
    p.feed(html)
    files = sorted((run_dir / "figures").glob("*.png"))
    assert [base64.b64decode(src.split(",", 1)[1]) for src in p.imgs] == [f.read_bytes() for f in files]


def _copy_run(run_dir: Path, dest: Path) -> Path:
    shutil.copytree(run_dir, dest, ignore=shutil.ignore_patterns("figures", "report.html"))
    return dest


@pytest.mark.parametrize("damage", ["empty", "missing", "first_column"])
def test_report_assumes_no_table_and_no_column(run_dir, tmp_path, damage):
    from tracer.app.report.html import build_report
    folder = _copy_run(run_dir, tmp_path / "run")
    for path in (folder / "tables").glob("*.json"):
        if damage == "missing":
            path.unlink()
            continue
        rows = json.loads(path.read_text())
        keep = list(rows[0])[:1] if rows else []
        path.write_text(json.dumps([] if damage == "empty" else [{k: r[k] for k in keep} for r in rows]))
    html = build_report(folder)
    assert 'id="findings"' in html and "qualified reviewers and the applicable law" in html


def test_q_values_are_shown_when_the_measure_table_has_them(run_dir, tmp_path):
    from tracer.app.report.html import build_report
    folder = _copy_run(run_dir, tmp_path / "run")
    path = folder / "tables" / "measure.json"
    rows = json.loads(path.read_text())
    path.write_text(json.dumps([{**r, "q_value": 0.0123} for r in rows]))
    html = build_report(folder)
    assert ", q 0.012" in _rows_of(html, "findings") and "<th>q</th>" in html and "Benjamini-Hochberg" in html
    # a measure table without q-values (as runs made before q-values were added) shows none
    path.write_text(json.dumps([{k: v for k, v in r.items() if k != "q_value"} for r in rows]))
    plain = build_report(folder)
    assert ", q " not in _rows_of(plain, "findings") and "Benjamini-Hochberg" not in plain


def test_a_run_with_periods_too_small_for_drift_has_a_report(run_dir, tmp_path):
    # 12 documents a year give about 14,000 tokens a decade, under the 20,000 a drift period needs
    folder = run_dir.parent.parent.parent
    (folder / "exp_small.toml").write_text(_experiment("time:10y").replace('"ws"', '"ws_small"'), encoding="utf-8")
    result = run_experiment(load_experiment(folder / "exp_small.toml"))
    html = (result.folder / "report.html").read_text(encoding="utf-8")
    drift = _rows_of(html, "drift")
    periods = pd.DataFrame(json.loads((result.folder / "tables" / "drift_tribune_mix_periods.json").read_text()))
    assert not periods.measured.any()
    assert "not measured" in drift and str(escape(periods.reason.iloc[0])) in drift
    assert f"not decomposed: 0 of {len(periods)} periods measured" in _rows_of(html, "findings")


# The browser measures the page: a script in a copy of the report writes element sizes into the DOM,
# which --dump-dom prints. Limits: no horizontal overflow, no table row taller than two lines of
# its text, and the findings ending within the first 900 px.
MEASURE = """<script>
window.addEventListener("load", () => {
  const out = {innerWidth: window.innerWidth, scrollWidth: document.documentElement.scrollWidth,
               findingsBottom: document.getElementById("findings").getBoundingClientRect().bottom + window.scrollY,
               wideTables: [], tallRows: [], rows: 0};
  for (const t of document.querySelectorAll("table")) {
    const r = t.getBoundingClientRect(), box = t.parentElement.getBoundingClientRect();
    if (r.right > box.right + 1 || t.scrollWidth > t.clientWidth + 1) out.wideTables.push(t.rows[0].innerText);
  }
  for (const tr of document.querySelectorAll("tbody tr")) {
    out.rows += 1;
    let limit = 0;
    for (const td of tr.cells) {
      const s = getComputedStyle(td);
      const line = parseFloat(s.lineHeight) || 1.2 * parseFloat(s.fontSize);
      limit = Math.max(limit, 2 * line + parseFloat(s.paddingTop) + parseFloat(s.paddingBottom)
                              + parseFloat(s.borderTopWidth) + parseFloat(s.borderBottomWidth) + 1);
    }
    const h = tr.getBoundingClientRect().height;
    if (h > limit) out.tallRows.push([Math.round(h), Math.round(limit), tr.innerText.slice(0, 80)]);
  }
  const pre = document.createElement("pre");
  pre.id = "layout-measure";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});
</script>"""


def measure_layout(report: Path, width: int, workdir: Path) -> dict:
    """The layout measurements of ``report`` in headless chromium at ``width`` x 900 px."""
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed and could not be installed here (.ci/run tries apt-get)")
    page = workdir / f"measured-{width}.html"
    page.write_text(report.read_text(encoding="utf-8").replace("</body>", MEASURE + "</body>"), encoding="utf-8")
    res = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                          "--disable-component-update", "--no-first-run", "--disable-sync", "--hide-scrollbars",
                          f"--user-data-dir={workdir / f'profile-{width}'}", f"--window-size={width},900",
                          "--virtual-time-budget=10000", "--dump-dom", page.as_uri()],
                         capture_output=True, text=True, timeout=180)
    start = res.stdout.find('<pre id="layout-measure">')
    assert start >= 0, res.stderr[-2000:]  # chromium is present: no measurement is a failure
    text = res.stdout[start + len('<pre id="layout-measure">'):res.stdout.index("</pre>", start)]
    return json.loads(html_text.unescape(text))


@pytest.mark.parametrize("width", [1280, 1920])
def test_report_layout_fits_the_page_in_a_browser(run_dir, tmp_path, width):
    m = measure_layout(run_dir / "report.html", width, tmp_path)
    assert m["innerWidth"] == width and m["rows"] > 50  # the page was laid out at this width, tables and all
    assert m["scrollWidth"] <= m["innerWidth"], m
    assert m["wideTables"] == []
    assert m["tallRows"] == []
    assert m["findingsBottom"] <= 900


def test_passages_are_marked_from_offsets_and_escaped():
    # a stored passage whose text holds markup and brackets; the marks come only from the offsets
    from tracer.app.report.html import _passages, environment
    text = f"The [[velmari]] spoke {SCRIPT} of agony ]] and <b>evil</b>"
    marks = [{"start": 10 + text.index(w), "end": 10 + text.index(w) + len(w), "word": w, "set": s}
             for w, s in (("velmari", "targets_x"), ("agony", "attributes_a"))]
    table = pd.DataFrame([{"passage_id": "d1#10", "doc_id": "d1", "source": "Gazette", "time": "1970",
                           "start": 10, "end": 10 + len(text), "evidence": "counters", "supporting": 0,
                           "countering": 1, "doc_rank": 3, "doc_change": 0.0042, "marks": marks, "text": text,
                           "note": ""}])
    p = _passages(table)[0]
    assert [s["text"] for s in p["segments"] if s["mark"]] == ["velmari", "agony"]
    assert "".join(s["text"] for s in p["segments"]) == text
    html = environment().get_template("_macros.html.j2").module.passage(p)
    assert SCRIPT not in html and "<b>evil</b>" not in html and "&lt;script&gt;" in html
    assert html.count("<mark") == 2 and "[[velmari]]" not in html and "[[<mark" in html
    assert '<mark title="targets_x">velmari</mark><sup class="set">targets_x</sup>' in html
    assert "counters (0 for, 1 against)" in html and "document rank 3, change if removed 0.0042" in html
    # a run stored before marks had offsets: its text shows unmarked, its [[ ]] as text
    old = _passages(pd.DataFrame([{"doc_id": "d1", "start": 0, "end": 9, "text": "[[a]] b", "marked": "[[a]] b"}]))
    assert old[0]["segments"] == [{"text": "[[a]] b", "mark": False, "set": None}]


def test_report_shows_the_passages_with_their_evidence(run_dir):
    html = (run_dir / "report.html").read_text(encoding="utf-8")
    section = html.split("<h4>Passages</h4>", 1)[1].split("</section>", 1)[0]
    assert "supports (" in section and "<sup class=\"set\">targets_x</sup>" in section
    assert "change if removed" in section and "[[" not in section

"""tracer run and the HTML report: sections, inline figures, no network, escaped corpus text, a real browser."""

import gzip
import importlib.util
import json
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tracer.app.cli import cli
from tracer.provenance.experiment import load_experiment
from tracer.app.pipeline import find_run, run_experiment

ROOT = Path(__file__).resolve().parents[2]
_spec = importlib.util.spec_from_file_location("gen", ROOT / "corpora_demo" / "generate_demo_corpus.py")
gen = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(gen)
SCRIPT = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("run")
    docs, _ = gen.generate(77, docs_per_year=12)
    # a document whose text carries markup, right where the probe words co-occur
    # a strongly planted document whose text carries markup inside a passage (the markup's words
    # are too rare to be counted, so the planted pairs stay within the window)
    body = " ".join("The velmari people spoke of agony and evil. In tarnside the market was busy on monday."
                    for _ in range(15))
    docs.append({"id": "hostile-1", "source": "Gazette", "date": "1990-01-01", "title": "Hostile <b>title</b>",
                 "text": body.replace("agony and evil", f"agony {SCRIPT} and evil", 1)})
    with gzip.open(folder / "small.jsonl.gz", "wt", encoding="utf-8") as f:
        f.writelines(json.dumps(d) + "\n" for d in docs)
    shutil.copyfile(ROOT / "configs" / "demo_tests.toml", folder / "tests.toml")
    (folder / "exp.toml").write_text("""
[corpus]
inputs = ["small.jsonl.gz"]
workspace = "ws"
[models]
ppmi_svd = { dim = 50 }
[measure]
tests = "tests.toml"
by = ["source"]
bootstrap = 2
[trace]
tests = ["gazette_outlet"]
verify = 2
[drift]
tests = ["tribune_mix"]
by = "time:20y"
bootstrap = 2
""", encoding="utf-8")
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
    args = ["trace", "--tests", str(ws_path.parent / "tests.toml"), "--test", "gazette_outlet", "--dim", "50",
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

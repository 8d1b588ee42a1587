"""Memory estimates: a setting that cannot fit stops before any work, naming the option to change."""

import numpy as np
import pytest
from click.testing import CliRunner

import tracer.core.count_memory as count_memory
import tracer.core.counting as counting
import tracer.core.ppmi_svd as ppmi_svd
from tracer.app.cli import cli
from tracer.core import memory
from tracer.core.count_engine import DEFAULT_SHARD_TOKENS
from tracer.core.counting import CountSettings, build_vocab, count_matrix
from tracer.core.ppmi_svd import PpmiSvdSettings, ppmi_svd_vectors
from tracer.core.threads import ThreadPool
from tracer.corpus.workspace import Workspace
from tracer.errors import NotEnoughMemory


def lee_inputs(ws, settings=CountSettings()):
    weights = np.ones(ws.n_documents)
    vocab = build_vocab(ws.tokens, ws.doc_offsets, weights, ws.vocab.words, settings)
    return weights, vocab


def test_the_override_and_the_system_figure(monkeypatch):
    monkeypatch.setenv(memory.AVAILABLE_ENV, "12.5")
    assert memory.available_bytes() == int(12.5 * 2 ** 20)
    monkeypatch.delenv(memory.AVAILABLE_ENV)
    # outside reference: the machine's physical memory from os.sysconf; what is available is below it
    total = __import__("os").sysconf("SC_PHYS_PAGES") * __import__("os").sysconf("SC_PAGE_SIZE")
    assert 0 < memory.available_bytes() <= total
    monkeypatch.setenv(memory.AVAILABLE_ENV, "lots")
    with pytest.raises(Exception, match="TRACER_AVAILABLE_MB must be a number of megabytes; got 'lots'"):
        memory.available_bytes()


def test_pairs_and_cells_of_a_small_count_are_the_counters(lee_ws):
    # the pair count is checked against a loop over positions; the cells against the counter's own
    settings = CountSettings(window=3)
    weights, vocab = lee_inputs(lee_ws, settings)
    id_map = vocab.id_map(len(lee_ws.vocab))
    size = count_memory.count_size(lee_ws.tokens, lee_ws.doc_offsets, weights, id_map, len(vocab), settings,
                                   DEFAULT_SHARD_TOKENS, pool=ThreadPool(1))
    kept = [np.count_nonzero(id_map[lee_ws.document_tokens(d)] >= 0) for d in range(lee_ws.n_documents)]
    assert size.shard_pairs == [sum(1 for n in kept for i in range(n) for j in range(i + 1, min(n, i + 4)))]
    upper = count_matrix(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab, len(lee_ws.vocab), settings,
                         symmetric=False)
    assert size.cells == upper.nnz  # the sample was every document: exact


def test_cells_extrapolated_from_samples_are_near_the_count(lee_ws, monkeypatch):
    monkeypatch.setattr(count_memory, "_SAMPLE_PAIRS", (20_000, 20_000))  # samples of a tenth of the corpus
    weights, vocab = lee_inputs(lee_ws)
    size = count_memory.count_size(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab.id_map(len(lee_ws.vocab)),
                                   len(vocab), CountSettings(), DEFAULT_SHARD_TOKENS, pool=ThreadPool(1))
    upper = count_matrix(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab, len(lee_ws.vocab), CountSettings(),
                         symmetric=False)
    assert upper.nnz <= size.cells <= 2 * upper.nnz  # on the safe side, within 2x


def test_a_count_that_cannot_fit_stops_before_counting(lee_ws, monkeypatch):
    weights, vocab = lee_inputs(lee_ws)
    size = count_memory.count_size(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab.id_map(len(lee_ws.vocab)),
                                   len(vocab), CountSettings(), DEFAULT_SHARD_TOKENS, pool=ThreadPool(1))
    need = size.peak(len(vocab), 1)

    def no_counting(*a, **k):
        raise AssertionError("counting started")

    monkeypatch.setattr(counting, "count_shard", no_counting)
    monkeypatch.setenv(memory.AVAILABLE_ENV, str(need / 2 ** 20 * 0.9))
    with pytest.raises(NotEnoughMemory, match=rf"^counting {lee_ws.n_tokens:,} tokens over {len(vocab):,} words needs "
                                              r"about [\d.,]+ MB at its peak but [\d.,]+ MB are available; raise "
                                              r"--min-count, set --max-vocab"):
        count_matrix(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab, len(lee_ws.vocab), CountSettings(), workers=1)
    monkeypatch.undo()
    monkeypatch.setenv(memory.AVAILABLE_ENV, str(need / 2 ** 20 * 1.1))
    assert count_matrix(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab, len(lee_ws.vocab), CountSettings(),
                        workers=1).nnz > 0


def test_an_svd_that_cannot_fit_stops_before_the_ppmi(lee_ws, monkeypatch):
    weights, vocab = lee_inputs(lee_ws)
    counts = count_matrix(lee_ws.tokens, lee_ws.doc_offsets, weights, vocab, len(lee_ws.vocab), CountSettings())
    need = memory.ppmi_svd_peak(len(vocab), counts.nnz, 400)

    def no_ppmi(*a, **k):
        raise AssertionError("PPMI started")

    monkeypatch.setattr(ppmi_svd, "ppmi_matrix", no_ppmi)
    monkeypatch.setenv(memory.AVAILABLE_ENV, str(need / 2 ** 20 * 0.9))
    with pytest.raises(NotEnoughMemory, match=r"^the PPMI and SVD of [\d,]+ words .* lower --dim"):
        ppmi_svd_vectors(counts, PpmiSvdSettings(dim=400))
    # a smaller dim needs less and goes on
    monkeypatch.undo()
    monkeypatch.setenv(memory.AVAILABLE_ENV, str(need / 2 ** 20 * 0.9))
    assert ppmi_svd_vectors(counts, PpmiSvdSettings(dim=10))[0].shape == (len(vocab), 10)


def test_the_command_line_says_which_option_to_change(tmp_path, small_jsonl):
    runner = CliRunner()
    assert runner.invoke(cli, ["ingest", str(small_jsonl), "-w", str(tmp_path / "w")]).exit_code == 0
    result = runner.invoke(cli, ["train", "-w", str(tmp_path / "w"), "--model", "ppmi-svd", "--min-count", "1",
                                 "--dim", "2"], env={memory.AVAILABLE_ENV: "0.0001"})
    assert result.exit_code == 1
    ws = Workspace(tmp_path / "w")
    error = [line for line in result.stderr.splitlines() if line.startswith("Error: ")]
    assert len(error) == 1
    assert error[0].startswith(f"Error: counting {ws.n_tokens} tokens over {len(ws.vocab)} words needs about ")
    assert "raise --min-count, set --max-vocab or narrow --window" in error[0]

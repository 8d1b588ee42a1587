"""Experiment files: one TOML file says what ``tracer run`` does, from corpus to report.

    [corpus]
    inputs = ["../corpora_demo/archive.jsonl.gz"]   # paths relative to this file
    workspace = "../demo-work"
    case_rule = "fold"                              # or "turkish" (a new workspace's case rule)

    [counts]
    window = 5
    min_count = 5

    [models]
    use = ["ppmi-svd"]                              # and/or "word2vec"
    ppmi_svd = { dim = 100 }
    word2vec = { dim = 100, epochs = 5, seeds = 1 }

    [measure]
    tests = "demo_tests.toml"
    by = ["source", "time:10y"]
    slices = ["all"]
    bootstrap = 20
    per_slice_words = false                         # default: only the words known in every slice

    [trace]
    tests = ["gazette_outlet"]
    slice = "all"
    verify = 5

    [drift]
    tests = ["rise_and_fall", "tribune_mix"]
    by = "time:10y"
    per_slice_words = false                         # default: the words known in every period

``per_slice_words`` defaults to false in both sections, as ``tracer measure`` and ``tracer drift``
do: slices compared side by side use the words known in every one of them (the words dropped
everywhere are listed). With slices of very different sizes the smallest one can then narrow
every other; ``per_slice_words = true`` measures each slice on its own known words instead.

Unknown keys and wrong types are errors that name the key and its line.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import tomllib
from pathlib import Path

from tracer.core.counting import CountSettings
from tracer.corpus.ingest import FieldMap
from tracer.corpus.tokenize import TokenizerSettings
from tracer.core.ppmi_svd import PpmiSvdSettings
from tracer.core.word2vec import Word2VecSettings
from tracer.errors import InputError, SettingError, TracerError

# section -> key -> (type or tuple of types, description for messages)
_LIST_OF_STR = ("list of text", lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v))
_STR = ("text", lambda v: isinstance(v, str))
_INT = ("whole number", lambda v: isinstance(v, int) and not isinstance(v, bool))
_BOOL = ("true or false", lambda v: isinstance(v, bool))
_NUM = ("number", lambda v: isinstance(v, (int, float)) and not isinstance(v, bool))
_TABLE = ("table", lambda v: isinstance(v, dict))

SCHEMA = {
    "corpus": {"inputs": _LIST_OF_STR, "workspace": _STR, "text_field": _STR, "id_field": _STR,
               "source_field": _STR, "time_field": _STR, "title_field": _STR, "lowercase": _BOOL,
               "normalization": _STR, "case_rule": _STR},
    "counts": {"window": _INT, "min_count": _INT, "weighting": _STR, "max_vocab": _INT},
    "models": {"use": _LIST_OF_STR, "ppmi_svd": _TABLE, "word2vec": _TABLE},
    "measure": {"tests": _STR, "by": _LIST_OF_STR, "slices": _LIST_OF_STR, "bootstrap": _INT, "seed": _INT,
                "min_words": _INT, "per_slice_words": _BOOL},
    "trace": {"tests": _LIST_OF_STR, "slice": _STR, "top": _INT, "verify": _INT, "rank_by": _STR},
    "drift": {"tests": _LIST_OF_STR, "by": _STR, "bootstrap": _INT, "words": _LIST_OF_STR, "per_slice_words": _BOOL},
    "compute": {"scheduler": _STR},
}
_MODEL_KEYS = {
    "ppmi_svd": {"dim": _INT, "eig_power": _NUM, "alpha": _NUM, "shift": _NUM, "seed": _INT},
    "word2vec": {"dim": _INT, "epochs": _INT, "negative": _INT, "seed": _INT, "seeds": _INT, "workers": _INT,
                 "skip_gram": _BOOL},
}
REQUIRED = {("corpus", "inputs"), ("corpus", "workspace"), ("measure", "tests")}
# the case rules an ingest may choose (the ingest command's --case-rule); "lower" is only the
# recorded rule of workspaces made before there was a choice
INGEST_CASE_RULES = ("fold", "turkish")


@dataclasses.dataclass(frozen=True)
class Experiment:
    """Everything ``tracer run`` needs, resolved (paths absolute)."""

    path: Path
    inputs: tuple[Path, ...]
    workspace: Path
    fields: FieldMap
    tokenizer: TokenizerSettings
    counts: CountSettings
    models: tuple[str, ...]
    ppmi_svd: PpmiSvdSettings
    word2vec: Word2VecSettings
    word2vec_seeds: int
    tests_file: Path
    measure_by: tuple[str, ...]
    measure_slices: tuple[str, ...]
    bootstrap: int
    seed: int
    min_words: int
    per_slice_words: bool
    trace_tests: tuple[str, ...]
    trace_slice: str
    trace_top: int
    trace_verify: int
    trace_rank_by: str
    drift_tests: tuple[str, ...]
    drift_by: str
    drift_bootstrap: int
    drift_words: tuple[str, ...]
    drift_per_slice_words: bool
    text: str
    scheduler: str | None = None  # a dask.distributed scheduler to count and run replicates on ([compute] scheduler)

    @property
    def hash(self) -> str:
        """Hash of the file's content: a run of an unchanged file can be reused."""
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()[:16]


def _line_of(text: str, section: str, key: str | None = None) -> int | None:
    """Line of ``[section]`` (or of ``key = ...`` inside it), 1-based; None if not found."""
    current = None
    for n, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        m = re.match(r"^\[([^\[\]]+)\]", stripped)
        if m:
            current = m.group(1).strip()
            if key is None and current == section:
                return n
            continue
        if key is not None and current == section and re.match(rf"^{re.escape(key)}\s*=", stripped):
            return n
    return None


def _where(path, text, section, key=None) -> str:
    line = _line_of(text, section, key)
    return f"{path}, line {line}" if line else str(path)


def _check_keys(table: dict, schema: dict, name: str, listing: str, where) -> None:
    """Every key of ``table`` is in ``schema`` and of its type; ``where(key)`` says file and line."""
    for key, v in table.items():
        if key not in schema:
            raise InputError(f"{where(key)}: unknown key {name}.{key} ({listing} {', '.join(schema)})")
        what, ok = schema[key]
        if not ok(v):
            raise InputError(f"{where(key)}: {name}.{key} must be a {what}, not {v!r}")


def _tokenizer(c: dict, path: Path, text: str) -> TokenizerSettings:
    """The tokenizer settings of ``[corpus]``; the case rule checked here so the error has its line."""
    rule = c.get("case_rule", "fold")
    if rule not in INGEST_CASE_RULES:
        raise InputError(f"{_where(path, text, 'corpus', 'case_rule')}: corpus.case_rule is {rule!r}; "
                         f"use {' or '.join(INGEST_CASE_RULES)}")
    lowercase = c.get("lowercase", True)
    if not lowercase and "case_rule" in c:
        raise InputError(f"{_where(path, text, 'corpus', 'case_rule')}: corpus.case_rule applies only when "
                         "words are lower-cased; remove it or lowercase = false")
    return TokenizerSettings(lowercase=lowercase, normalization=c.get("normalization", "NFKC"), case_rule=rule)


def load_experiment(path: str | Path) -> Experiment:
    """Read and check an experiment file; every error names the file, the key and its line."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such experiment file")
    text = path.read_text(encoding="utf-8")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{path}: not valid TOML: {e}") from None
    for section, value in data.items():
        if section not in SCHEMA:
            raise InputError(f"{_where(path, text, section)}: unknown section [{section}] "
                             f"(the sections are {', '.join(SCHEMA)})")
        if not isinstance(value, dict):
            raise InputError(f"{path}: {section} must be a table [{section}]")
        _check_keys(value, SCHEMA[section], section, f"the keys of [{section}] are",
                    lambda key, section=section: _where(path, text, section, key))
    for sub in ("ppmi_svd", "word2vec"):
        _check_keys(data.get("models", {}).get(sub, {}), _MODEL_KEYS[sub], f"models.{sub}", "the keys are",
                    lambda key, sub=sub: _where(path, text, "models", sub))
    for section, key in sorted(REQUIRED):
        if key not in data.get(section, {}):
            raise InputError(f"{path}: missing {section}.{key}")
    base = path.parent
    c, m, meas = data["corpus"], data.get("models", {}), data["measure"]
    tr, dr = data.get("trace", {}), data.get("drift", {})
    use = tuple(m.get("use", ["ppmi-svd"]))
    for name in use:
        if name not in ("ppmi-svd", "word2vec"):
            raise InputError(f"{_where(path, text, 'models', 'use')}: models.use lists {name!r}; "
                             "use ppmi-svd and/or word2vec")
    try:
        w2v = dict(m.get("word2vec", {}))
        seeds = w2v.pop("seeds", 1)
        exp = Experiment(
            path=path, inputs=tuple((base / p).resolve() for p in c["inputs"]),
            workspace=(base / c["workspace"]).resolve(),
            fields=FieldMap(text=c.get("text_field", "text"), id=c.get("id_field", "id"),
                            source=c.get("source_field", "source"), time=c.get("time_field"),
                            title=c.get("title_field", "title")),
            tokenizer=_tokenizer(c, path, text),
            counts=CountSettings(**data.get("counts", {})),
            models=use, ppmi_svd=PpmiSvdSettings(**m.get("ppmi_svd", {})), word2vec=Word2VecSettings(**w2v),
            word2vec_seeds=seeds, tests_file=(base / meas["tests"]).resolve(),
            measure_by=tuple(meas.get("by", [])), measure_slices=tuple(meas.get("slices", ["all"])),
            bootstrap=meas.get("bootstrap", 20), seed=meas.get("seed", 0), min_words=meas.get("min_words", 3),
            per_slice_words=meas.get("per_slice_words", False),
            trace_tests=tuple(tr.get("tests", [])), trace_slice=tr.get("slice", "all"), trace_top=tr.get("top", 20),
            trace_verify=tr.get("verify", 5), trace_rank_by=tr.get("rank_by", "gap"),
            drift_tests=tuple(dr.get("tests", [])), drift_by=dr.get("by", "time:10y"),
            drift_bootstrap=dr.get("bootstrap", 20), drift_words=tuple(dr.get("words", [])),
            drift_per_slice_words=dr.get("per_slice_words", False), text=text,
            scheduler=data.get("compute", {}).get("scheduler"))
    except SettingError as e:
        raise InputError(f"{path}: {e}") from None
    return exp


def experiment_summary(exp: Experiment) -> dict:
    """The experiment as plain data (for the run folder and the report)."""
    out = {}
    for f in dataclasses.fields(exp):
        v = getattr(exp, f.name)
        if f.name == "text":
            continue
        if dataclasses.is_dataclass(v):
            v = dataclasses.asdict(v)
        elif isinstance(v, Path):
            v = str(v)
        elif isinstance(v, tuple):
            v = [str(x) for x in v]
        out[f.name] = v
    return json.loads(json.dumps(out, default=str))


__all__ = ["Experiment", "load_experiment", "experiment_summary", "TracerError"]

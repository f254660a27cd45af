"""Seeded mutation fuzzing of model files and Open-PSA MEF files.

Every mutated file must end in success or exit status 2 with one line per
problem naming the file (``troubleshoot: FILE[:LINE]: error: ...``): never an
exception, another exit status, or a hang. A model file that ``check``
accepts is also run through ``suggest --json`` (network, join tree, ranking);
an MEF file that ``import-mef`` accepts must give a model file that ``check``
accepts (the importer never writes what its validator refuses).

Cases per run: ``TROUBLESHOOT_FUZZ_MODELS`` (default 300) model files and
``TROUBLESHOOT_FUZZ_MEF`` (default 150) MEF files; ``TROUBLESHOOT_FUZZ_SEED``
(default 1) picks the sequence. Each case has its own seed, printed with any
failure, so one case can be replayed alone. Mutation fuzzing with a corpus of
valid and invalid seeds is common practice (e.g. AFL's havoc stage).
"""

from __future__ import annotations

import contextlib
import io
import os
import random
import re
import signal
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from troubleshoot.cli import main
from troubleshoot.model.demos import demo_path
from troubleshoot.model.mef import write_mef
from troubleshoot.model.xmlfile import load_model

HERE = Path(__file__).parent
MODEL_CASES = int(os.environ.get("TROUBLESHOOT_FUZZ_MODELS", "300"))
MEF_CASES = int(os.environ.get("TROUBLESHOOT_FUZZ_MEF", "150"))
SEED = int(os.environ.get("TROUBLESHOOT_FUZZ_SEED", "1"))
#: Seconds a case may take before it counts as a hang (the machine is shared and slow).
HANG_SECONDS = 60

# Values that have broken parsers and arithmetic before: signs, limits, non-ASCII digits.
NUMBERS = ["-1", "0", "1", "2", "-0", "1e308", "1e309", "-1e308", "1e-320", "nan", "NaN", "inf", "-inf",
           "INF", "1e-5", "0.5", "1.5", "100000000000000000000000000000", "", " ", "１", "٠.٥", "0.0_5",
           "1_000", "0x10", "1e", ".", "+.5", "5.", "-0.0", "3", "1000", "2000"]
TOKENS = ["<", ">", "&", "&amp;", "&lt;", "\"", "'", "]]>", "<!--", "-->", "<![CDATA[x]]>", "\x00", "\u0301",
          "~", ":", "é", "\ufeff", "<!DOCTYPE r SYSTEM \"x.dtd\">", "<!DOCTYPE r [<!ENTITY e \"x\">]>", "&e;",
          "<?pi x?>", "\n", "\t", "  ", "<x/>", "</x>", "\u202e", "\U0001F600"]
MODEL_TAGS = ["and-gate", "or-gate", "atleast-gate", "not-gate", "inhibit-gate", "basic-event", "input",
              "condition", "probability", "failure-rate", "repair", "check", "symptom", "cause", "outcomes",
              "label", "metadata", "top-event", "fault-tree", "checks", "symptoms", "abnormal", "shows",
              "false-alarm", "verification", "escalation"]
MEF_TAGS = ["and", "or", "not", "xor", "nand", "nor", "iff", "imply", "atleast", "cardinality", "gate",
            "basic-event", "house-event", "event", "float", "int", "bool", "parameter", "exponential",
            "Weibull", "lognormal-deviate", "beta-deviate", "gamma-deviate", "uniform-deviate",
            "normal-deviate", "histogram", "bin", "add", "sub", "mul", "div", "neg", "define-gate",
            "define-basic-event", "define-parameter", "define-house-event", "constant", "system-mission-time",
            "define-CCF-group", "define-fault-tree", "model-data", "pi"]
ATTRIBUTES = ["id", "ref", "k", "cost", "detection", "false-alarm", "name", "min", "max", "value",
              "unlisted-causes", "per-hour", "exposure-hours", "format-version", "verify", "probability"]


def _replace_one(rng: random.Random, text: str, pattern: str, choices: list[str]) -> str:
    """Replace group 1 (or the whole match) of one match of ``pattern`` by one of ``choices``."""
    spans = [m.span(1 if m.re.groups else 0) for m in re.finditer(pattern, text)]
    if not spans:
        return text
    start, end = rng.choice(spans)
    return text[:start] + rng.choice(choices) + text[end:]


def _numbers(rng: random.Random, text: str) -> str:
    return _replace_one(rng, text, r"-?\d+(?:\.\d+)?(?:[eE]-?\d+)?", NUMBERS)


def _plausible_numbers(rng: random.Random, text: str) -> str:
    """A number replaced by another plausible one (keeps many files valid, so they reach the engine)."""
    return _replace_one(rng, text, r"\d+\.\d+(?:[eE]-?\d+)?", [f"{rng.random():.3g}", "0", "1", f"{rng.random():.2e}"])


#: Element names that can stand for one another (model gates, MEF formulas, MEF expressions).
KIND_FAMILIES = [["and-gate", "or-gate", "atleast-gate", "not-gate"],
                 ["and", "or", "nand", "nor", "xor", "not", "iff", "imply", "atleast"],
                 ["float", "int", "exponential", "Weibull", "lognormal-deviate", "beta-deviate"]]


def _kinds(rng: random.Random, text: str) -> str:
    """An element renamed at both ends: an AND gate becomes an OR or a vote, and so on."""
    family = rng.choice(KIND_FAMILIES)
    found = list(re.finditer(r"<(" + "|".join(family) + r")(\s[^<>]*)?>(.*?)</\1>", text, re.DOTALL))
    if not found:
        return text
    match = rng.choice(found)
    new = rng.choice(family)
    return text[:match.start()] + f"<{new}{match.group(2) or ''}>{match.group(3)}</{new}>" + text[match.end():]


def _values(rng: random.Random, text: str) -> str:
    """Replace one quoted attribute value by another value of the file (refs, ids, numbers)."""
    spans = [m.span(1) for m in re.finditer(r'="([^"]*)"', text)]
    if len(spans) < 2:
        return text
    start, end = rng.choice(spans)
    s2, e2 = rng.choice(spans)
    return text[:start] + text[s2:e2] + text[end:]


def _tags(rng: random.Random, text: str, vocabulary: list[str]) -> str:
    return _replace_one(rng, text, r"</?([A-Za-z][\w-]*)", vocabulary)


def _attribute_names(rng: random.Random, text: str) -> str:
    return _replace_one(rng, text, r'\s([A-Za-z][\w-]*)="', ATTRIBUTES)


def _lines(rng: random.Random, text: str) -> str:
    lines = text.split("\n")
    i, j = rng.randrange(len(lines)), rng.randrange(len(lines))
    what = rng.randrange(4)
    if what == 0:
        del lines[i]
    elif what == 1:
        lines.insert(j, lines[i])
    elif what == 2:
        lines[i], lines[j] = lines[j], lines[i]
    else:
        lines[i:i] = [lines[i]] * rng.randrange(2, 50)
    return "\n".join(lines)


def _element_copies(rng: random.Random, text: str) -> str:
    """Copy a whole one-line element many times, or wrap one in deep nesting."""
    found = [m.span() for m in re.finditer(r"<([A-Za-z][\w-]*)\b[^<>]*?(?:/>|>[^<>]*</\1>)", text)]
    if not found:
        return text
    start, end = rng.choice(found)
    if rng.random() < 0.5:
        return text[:end] + text[start:end] * rng.randrange(2, 400) + text[end:]
    depth = rng.choice([10, 100, 300, 3000])
    tag = rng.choice(["or", "and", "add", "x"])
    return text[:start] + f"<{tag}>" * depth + text[start:end] + f"</{tag}>" * depth + text[end:]


def _bytes(rng: random.Random, text: str) -> str:
    i = rng.randrange(len(text) + 1)
    what = rng.randrange(4)
    if what == 0:
        return text[:i] + text[i + rng.randrange(1, 200):]
    if what == 1:
        return text[:i] + rng.choice(TOKENS) + text[i:]
    if what == 2:
        return text[:i]
    j = rng.randrange(len(text) + 1)
    return text[:i] + text[min(i, j):max(i, j)] + text[i:]


MUTATORS = [_numbers, _plausible_numbers, _plausible_numbers, _kinds, _kinds, _values, _values,
            _attribute_names, _lines, _element_copies, _bytes, _bytes]


def mutate(rng: random.Random, text: str, vocabulary: list[str]) -> bytes:
    """One to three mutations of the text, then an encoding (mostly UTF-8)."""
    for _ in range(rng.choices([1, 2, 3], weights=[6, 3, 1])[0]):
        mutator = rng.choice(MUTATORS + ["tags"])
        text = _tags(rng, text, vocabulary) if mutator == "tags" else mutator(rng, text)
    encoding = rng.choices(["utf-8", "utf-16", "utf-16-le", "utf-16-be", "utf-32", "latin-1"],
                           weights=[20, 1, 1, 1, 1, 1])[0]
    try:
        data = text.encode(encoding)
    except UnicodeEncodeError:
        data = text.encode("utf-8")
    if rng.random() < 0.02:  # a flipped byte
        k = rng.randrange(len(data) or 1)
        data = data[:k] + bytes([rng.randrange(256)]) + data[k + 1:]
    return data


@dataclass
class Tally:
    """What the cases ended in."""

    cases: int = 0
    accepted: int = 0
    refused: int = 0
    crashes: list = field(default_factory=list)
    hangs: list = field(default_factory=list)

    def line(self, what: str) -> str:
        return (f"fuzz: {self.cases:,} {what}: {self.accepted:,} accepted, {self.refused:,} refused (exit 2), "
                f"{len(self.crashes)} tracebacks or bad exits, {len(self.hangs)} hangs")


class Hang(Exception):
    pass


def _alarm(signum, frame):
    raise Hang()


def run(argv: list[str]) -> tuple[int, str, str]:
    """The CLI in this process: (exit status, stdout, stderr); exceptions propagate."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(argv)
    return status, out.getvalue(), err.getvalue()


def problems_name_the_file(err: str, path: Path) -> bool:
    """Every line of a refusal is 'troubleshoot: FILE[:LINE]: error|warning: ...'."""
    pattern = re.compile(re.escape(f"troubleshoot: {path}") + r"(?::\d+)?: (error|warning): \S")
    lines = [line for line in err.splitlines() if line.strip()]
    return bool(lines) and all(pattern.match(line) for line in lines) and any(": error: " in x for x in lines)


def one_case(tally: Tally, label: str, body) -> None:
    """Run one case under the hang alarm and tally how it ended."""
    tally.cases += 1
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(HANG_SECONDS)
    try:
        outcome = body()
    except Hang:
        tally.hangs.append(label)
        return
    except BaseException as exc:  # noqa: BLE001 - any exception is the bug being counted
        if isinstance(exc, KeyboardInterrupt):
            raise
        tally.crashes.append(f"{label}: {type(exc).__name__}: {exc}"[:300])
        return
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    if outcome is True:
        tally.accepted += 1
    elif outcome is False:
        tally.refused += 1
    else:
        tally.crashes.append(f"{label}: {outcome}"[:300])


def model_corpus() -> list[str]:
    paths = [demo_path("rooftop"), demo_path("booster")]
    paths += sorted((HERE / "bad_models").glob("*.xml"))
    return [p.read_text(encoding="utf-8") for p in paths]


def mef_corpus(tmp_path: Path) -> list[str]:
    texts = [p.read_text(encoding="utf-8") for p in sorted((HERE / "mef_files").glob("*.xml"))]
    for name in ("rooftop", "booster"):
        out = tmp_path / f"{name}.mef.xml"
        write_mef(load_model(demo_path(name)), out)
        texts.append(out.read_text(encoding="utf-8"))
    return texts


def fuzz_models(tmp_path: Path, cases: int, seed: int) -> Tally:
    corpus = model_corpus()
    tally = Tally()
    path = tmp_path / "case.xml"
    for case in range(cases):
        rng = random.Random(f"{seed}:model:{case}")
        # Mostly the two demos (so that many mutants stay valid and reach the engine), else a bad model.
        base = corpus[rng.randrange(2)] if rng.random() < 0.7 else rng.choice(corpus)
        path.write_bytes(mutate(rng, base, MODEL_TAGS))

        def body():
            status, _out, err = run(["check", str(path)])
            if status == 2:
                return False if problems_name_the_file(err, path) else f"exit 2 without file: {err[:200]!r}"
            if status != 0:
                return f"check exit {status}: {err[:200]!r}"
            status, out, err = run(["suggest", str(path), "--json"])
            if status not in (0, 2):
                return f"suggest exit {status}: {err[:200]!r}"
            if status == 2 and "Traceback" in err:
                return f"suggest: {err[:200]!r}"
            return True

        one_case(tally, f"model case {case} (seed {seed})", body)
    return tally


def fuzz_mef(tmp_path: Path, cases: int, seed: int) -> Tally:
    corpus = mef_corpus(tmp_path)
    tally = Tally()
    path, out = tmp_path / "case.mef.xml", tmp_path / "out.xml"
    for case in range(cases):
        rng = random.Random(f"{seed}:mef:{case}")
        path.write_bytes(mutate(rng, rng.choice(corpus), MEF_TAGS))
        out.unlink(missing_ok=True)

        def body():
            status, _out, err = run(["import-mef", str(path), "-o", str(out)])
            if status == 2:
                return False if problems_name_the_file(err, path) else f"exit 2 without file: {err[:200]!r}"
            if status != 0:
                return f"import-mef exit {status}: {err[:200]!r}"
            status, _out, err = run(["check", str(out)])
            if status != 0:
                return f"the imported model fails check: {err[:300]!r}"
            return True

        one_case(tally, f"MEF case {case} (seed {seed})", body)
    return tally


def _report(line: str, capsys) -> None:
    with capsys.disabled():
        print("\n" + line)


def test_fuzz_model_files(tmp_path, capsys):
    tally = fuzz_models(tmp_path, MODEL_CASES, SEED)
    _report(tally.line("model files"), capsys)
    assert not tally.crashes, tally.crashes[:5]
    assert not tally.hangs, tally.hangs[:5]
    # The mutations keep some files valid and break most: both paths are exercised.
    assert tally.accepted > 0 and tally.refused > tally.cases // 4


def test_fuzz_mef_files(tmp_path, capsys):
    tally = fuzz_mef(tmp_path, MEF_CASES, SEED)
    _report(tally.line("MEF files"), capsys)
    assert not tally.crashes, tally.crashes[:5]
    assert not tally.hangs, tally.hangs[:5]
    assert tally.accepted > 0 and tally.refused > 0


@pytest.mark.parametrize("seed", [3, 4])
def test_mutations_are_seeded(seed):
    text = model_corpus()[0]
    first = [mutate(random.Random(f"{seed}:{i}"), text, MODEL_TAGS) for i in range(5)]
    again = [mutate(random.Random(f"{seed}:{i}"), text, MODEL_TAGS) for i in range(5)]
    assert first == again and len(set(first)) > 1

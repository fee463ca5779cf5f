"""Every ``stopwise`` command quoted in README.md and docs/*.md runs, as written, in a test.

What is extracted. Every line of a fenced or indented code block, and every inline code span,
that starts with ``stopwise SUBCOMMAND`` (also ``.venv/bin/stopwise`` and a ``$ `` prompt);
a block line ending in ``\\`` continues on the next. ``make ...`` lines are out of scope
(they call the same commands). Each extracted command falls in exactly one kind, decided by
its text alone, so a command added to the docs is tested without editing this file:

* **command**: it has arguments and none is elided: it is run in process through
  ``stopwise.cli.main`` (the function the ``stopwise`` console script calls) in a scratch
  folder, and must exit 0 (or as ``EXPECTED`` says, with the reason there). Placeholders
  are resolved first (``PLACEHOLDERS``: ``ID``, ``NAME``, ``TASK_ID``, ``CAMPAIGN``, ``N``,
  ``/shared/results`` ...); files a line names (``my.csv``, ``data/plants.csv``,
  ``my/trial.yaml``, ``path/to/file.yaml``) are made by the scratch fixture. A shell pipe
  ``| tail -n K`` is applied to the captured output; any other shell syntax fails the test.
  Comments (``# ...``) are the shell's and are dropped.
* **synopsis**: it shows optional parts in brackets (``stopwise rank CAMPAIGN [--root DIR]``):
  the subcommand must exist and every ``--option`` it names must be one the subcommand
  takes (its ``--help``, or for ``sweep`` and ``run``, which hand the rest to Hydra, the
  usage line ``stopwise --help`` prints), with its value among the choices when the
  option has choices.
* **mention**: a subcommand named without arguments (``stopwise sweep``) or with elided
  ones (``stopwise sweep ...``): checked like a synopsis.

Also checked: every ``--option`` quoted in inline code (``--by passes_to_target``,
``ls --campaign``) is an option of some subcommand (``FOREIGN_OPTIONS`` lists the quoted
options that belong to other programs, each with its reason), and every ``python`` code block
of README.md and docs/*.md runs (the blocks of one file in order, in one namespace, in the
scratch folder).

Budgets. In the default suite every ``sweep`` and ``run`` command gets ``budget.iterations=20``
appended (the one change made to a quoted line, the same for all of them), and the scratch
folder holds the demo, stochastic and margins campaigns swept that way before the first
command, so that a line such as ``stopwise rank demo`` finds what the README's earlier
lines would have made. The same commands run exactly as written, with nothing appended and
the campaigns at their full budgets, in the slow suite (``-m slow``).

Network and SLURM. Commands run with sockets refused and openml pointed at the cache the tests
build (``openml_cache`` in conftest.py), so the OpenML lines run offline against it; the
concrete OpenML references of ``datasets fetch`` lines stand for the cache's own datasets
(``OPENML_REFS``). A command with ``hydra/launcher=slurm`` is skipped, with the reason,
when no SLURM scheduler answers (the test of tests/sweep/test_slurm.py); where one does,
it runs on the scratch folder (whose demo campaign is stored, so the line resumes it;
tests/sweep/test_slurm.py launches campaigns on fresh roots).
"""
from __future__ import annotations

import io
import re
import shlex
import subprocess
import sys
from contextlib import redirect_stderr, redirect_stdout
from dataclasses import dataclass
from pathlib import Path

import pytest

from conftest import OML_DIABETES, OML_IRIS, OML_SUITE, OML_TASK_DIABETES, OML_TASK_IRIS
from helpers.sweep import scheduler_missing
from stopwise.cli import COMMANDS, USAGE, main

REPO = Path(__file__).resolve().parents[1]
DOCS = [REPO / "README.md", *sorted((REPO / "docs").glob("*.md"))]
QUICK = ["budget.iterations=20"]  # appended to every sweep and run in the default suite
PROMPT = re.compile(r"^(?:\$ )?(?:\.venv/bin/)?stopwise (?=[a-z])")

# placeholder -> what it stands for in the scratch folder (whole words only)
PLACEHOLDERS = {
    "SUITE": str(OML_SUITE),             # an OpenML suite the test-built cache holds
    "TASK_ID": str(OML_TASK_DIABETES),   # an OpenML task the test-built cache holds
    "ID": str(OML_DIABETES),             # an OpenML dataset the test-built cache holds
    "NAME": "diabetes_copy",             # a dataset name of the user's choosing
    "CAMPAIGN": "demo",                  # a stored campaign
    "N": "2",                            # a count (--jobs N)
    "/shared/project/results": "results",  # a results root every node sees: the scratch folder's
    "/shared/results": "results",
}
# concrete OpenML references in `datasets fetch` lines -> the cache's datasets and tasks
OPENML_REFS = {"61": str(OML_IRIS), "59": str(OML_TASK_IRIS), "iris@1": "iris-copy@1"}
# exit codes other than 0, with the reason
EXPECTED = {
    "stopwise datasets fetch 61 iris@1 --task 59": (
        1, "offline, a NAME@VERSION reference cannot be resolved (openml looks names up on its server and keeps "
           "no index of them in its cache): the ids are fetched from the cache and the name gives one line, "
           "exit 1", "could not fetch OpenML dataset iris-copy@1"),
}
# options quoted in the docs that belong to another program
FOREIGN_OPTIONS = {
    "--array": "sbatch's job-array option, quoted in docs/cluster.md as what the launcher hands SLURM",
}


@dataclass(frozen=True)
class Quoted:
    path: Path
    line: int
    text: str          # as quoted (prompt and comment included)
    inline: bool

    @property
    def where(self) -> str:
        return f"{self.path.relative_to(REPO)}:{self.line}"

    @property
    def words(self) -> list[str]:
        return shlex.split(PROMPT.sub("stopwise ", self.text, count=1), comments=True)

    @property
    def kind(self) -> str:
        w = self.words
        if re.search(r"\[[^\]]*\]", self.text.split(" #")[0]) and not re.search(r"=\[", self.text):
            return "synopsis"
        if any(x in ("...", "…") for x in w) or (w[-1].startswith("--") and w[-1] not in FLAGS):
            return "mention"  # arguments elided, or an option quoted without its value
        if self.inline and (len(w) <= 2 or w[1:] == ["datasets", "fetch"]):
            return "mention"  # a command named in a sentence
        return "command"


FLAGS = {"--summary", "--strict", "--quarantine", "--path"}  # options that take no value


def quoted_commands() -> list[Quoted]:
    out = []
    for path in DOCS:
        lines = path.read_text().splitlines()
        fenced, i = False, 0
        while i < len(lines):
            line = lines[i]
            if line.strip().startswith("```"):
                fenced = not fenced
                i += 1
                continue
            block = fenced or (line.startswith("    ") and line.strip())
            if block:
                s = line.strip()
                if PROMPT.match(s):
                    start = i
                    while s.endswith("\\") and i + 1 < len(lines):  # a shell line continues
                        i += 1
                        s = s[:-1].rstrip() + " " + lines[i].strip()
                    # a synopsis in an indented block continues on lines that open a bracket
                    while not fenced and i + 1 < len(lines) and lines[i + 1].strip().startswith("["):
                        i += 1
                        s += " " + lines[i].strip()
                    out.append(Quoted(path, start + 1, s, inline=False))
            else:
                for m in re.finditer(r"`([^`]+)`", line):
                    s = m.group(1).strip()
                    if PROMPT.match(s):
                        out.append(Quoted(path, i + 1, s, inline=True))
            i += 1
    return out


ALL = quoted_commands()
COMMAND_LINES = [q for q in ALL if q.kind == "command"]


def resolve(q: Quoted) -> tuple[list[str], str]:
    """The argv a quoted command stands for (placeholders resolved), and its shell pipe."""
    text = PROMPT.sub("stopwise ", q.text, count=1)
    words = shlex.split(text, comments=True)
    pipe = ""
    if "|" in words:
        k = words.index("|")
        pipe = " ".join(words[k + 1:])
        words = words[:k]
    argv = []
    for w in words[1:]:
        for key, value in PLACEHOLDERS.items():
            w = re.sub(rf"(?<![\w/.-]){re.escape(key)}(?![\w/.-])", value, w) if key.startswith("/") else \
                re.sub(rf"(?<![\w-]){re.escape(key)}(?![\w-])", value, w)
        argv.append(w)
    if argv[:2] == ["datasets", "fetch"]:
        argv = [OPENML_REFS.get(w, w) for w in argv]
    return argv, pipe


def distinct_commands() -> dict[tuple, list[Quoted]]:
    """Quoted commands by what they run (the same command quoted twice runs once)."""
    out: dict[tuple, list[Quoted]] = {}
    for q in COMMAND_LINES:
        argv, pipe = resolve(q)
        out.setdefault((tuple(argv), pipe), []).append(q)
    return out


DISTINCT = distinct_commands()


def run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main(list(argv))
    return code, out.getvalue(), err.getvalue()


# ---------------------------------------------------------------- the scratch folders

CAMPAIGN_FILE = ("# @package _global_\n# a small campaign file for the docs' `sweep FILE.yaml` lines\n"
                 "hydra:\n  sweeper:\n    params:\n      dataset: diabetes\n      solver: gd,nesterov\n"
                 "      seed: 0,1\n")


def make_files(folder: Path) -> None:
    """The files the quoted lines name: two CSV tables and two campaign files."""
    from sklearn.datasets import load_diabetes

    d = load_diabetes(as_frame=True).frame.head(200)
    d.rename(columns={"target": "y"}).to_csv(folder / "my.csv", index=False)
    (folder / "data").mkdir()
    d.rename(columns={"target": "yield"}).to_csv(folder / "data" / "plants.csv", index=False)
    for f in ("my/trial.yaml", "path/to/file.yaml"):
        (folder / f).parent.mkdir(parents=True, exist_ok=True)
        (folder / f).write_text(CAMPAIGN_FILE)


def scratch(tmp_path_factory, extra: list[str]) -> Path:
    folder = tmp_path_factory.mktemp("docs-commands")
    make_files(folder)
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(folder)
        for name in ("demo", "stochastic", "margins"):  # what the README's first lines make
            code, out, err = run(["sweep", name, *extra])
            assert code == 0, (name, out[-2000:], err[-2000:])
    return folder


@pytest.fixture(scope="module")
def quick_folder(tmp_path_factory):
    return scratch(tmp_path_factory, QUICK)


@pytest.fixture(scope="module")
def full_folder(tmp_path_factory):
    return scratch(tmp_path_factory, [])


# ---------------------------------------------------------------- the checks

def test_the_docs_quote_commands_and_every_one_has_a_kind():
    """A broken extraction would test nothing: the README alone quotes more than 25 commands."""
    readme = [q for q in ALL if q.path.name == "README.md"]
    assert len(readme) >= 25, [q.text for q in readme]
    assert {q.kind for q in ALL} == {"command", "synopsis", "mention"}
    assert len(COMMAND_LINES) >= 40
    for q in ALL:
        assert q.words[1] in COMMANDS, f"{q.where}: {q.text!r} names no stopwise command"


def _run_quoted(key, folder: Path, monkeypatch, extra: list[str]) -> None:
    argv, pipe = key
    quoted = DISTINCT[key]
    first = quoted[0]
    if "hydra/launcher=slurm" in argv:
        why = scheduler_missing()
        if why:
            pytest.skip(f"{first.where} needs a SLURM scheduler: {why}")
        argv = [_site(a) for a in argv]
    monkeypatch.chdir(folder)
    if argv[0] in ("sweep", "run"):
        argv = [*argv, *extra]
    code, out, err = run(argv)
    want, why, says = EXPECTED.get(PROMPT.sub("stopwise ", first.text.split(" #")[0].strip(), count=1),
                                   (0, "", ""))
    where = ", ".join(q.where for q in quoted)
    assert code == want, f"{where}: `{' '.join(argv)}` exited {code}\n{out[-3000:]}\n{err[-3000:]}"
    if says:
        assert says in err, (why, err)
    if pipe:
        m = re.fullmatch(r"tail -n (\d+)", pipe)
        assert m, f"{where}: cannot apply the shell pipe {pipe!r}; quote a command without it or teach this test"
        assert len(out.splitlines()[-int(m.group(1)):]) == int(m.group(1))


def _site(word: str) -> str:
    """A SLURM line's site-specific words: the partition and the venv the jobs activate."""
    if word == "hydra.launcher.partition=cpu":
        res = subprocess.run(["sinfo", "--noheader", "--format=%P"], capture_output=True, text=True, timeout=20)
        parts = res.stdout.split()
        default = next((p.rstrip("*") for p in parts if p.endswith("*")), parts[0] if parts else "cpu")
        return f"hydra.launcher.partition={default}"
    return word.replace("/shared/project/.venv/bin/activate", str(Path(sys.executable).parent / "activate"))


def _ids(keys):
    return [f"{DISTINCT[k][0].where} {' '.join(k[0])[:60]}" for k in keys]


@pytest.mark.parametrize("key", list(DISTINCT), ids=_ids(DISTINCT))
def test_quoted_command_runs_with_small_budgets(key, quick_folder, monkeypatch, openml_cache):
    _run_quoted(key, quick_folder, monkeypatch, QUICK)


@pytest.mark.slow
@pytest.mark.parametrize("key", list(DISTINCT), ids=_ids(DISTINCT))
def test_quoted_command_runs_exactly_as_written(key, full_folder, monkeypatch, openml_cache):
    _run_quoted(key, full_folder, monkeypatch, [])


def options_of(sub: str) -> dict[str, set[str] | None]:
    """The options a subcommand takes, with their choices (None: any value)."""
    argv = [*sub.split(), "--help"]
    code, out, _ = run(argv)
    if code != 0:  # sweep and run hand their arguments to Hydra: their options are on the usage line
        line = next(ln for ln in USAGE.splitlines() if ln.strip().startswith(sub + " "))
        out = line
    found: dict[str, set[str] | None] = {}
    for m in re.finditer(r"(--[a-z][a-z-]*)(?:[ =]\{([^}]*)\})?", out):
        found.setdefault(m.group(1), set(m.group(2).split(",")) if m.group(2) else None)
    return found


def _sub(words: list[str]) -> str:
    return "datasets fetch" if words[1:3] == ["datasets", "fetch"] else words[1]


def _check_options(sub: str, words: list[str], where: str) -> None:
    known = options_of(sub)
    for i, w in enumerate(words):
        if not w.startswith("--"):
            continue
        opt, _, value = w.partition("=")
        assert opt in known, f"{where}: stopwise {sub} has no option {opt}; it takes {', '.join(sorted(known))}"
        value = value or (words[i + 1] if i + 1 < len(words) else "")
        if known[opt] is not None and value and not value.startswith(("-", "[", "{")) and not value.isupper():
            assert value in known[opt], f"{where}: {opt} {value!r} is not one of {sorted(known[opt])}"


@pytest.mark.parametrize("q", [q for q in ALL if q.kind != "command"], ids=lambda q: f"{q.where} {q.text[:50]}")
def test_synopses_and_mentions_name_real_commands_and_options(q):
    words = [w for w in re.split(r"[\s\[\]|]+", PROMPT.sub("stopwise ", q.text.split(" #")[0], count=1)) if w]
    sub = _sub(words)
    assert words[1] in COMMANDS, f"{q.where}: no stopwise command {words[1]!r}"
    _check_options(sub, words, q.where)


def inline_options() -> list[tuple[str, str, list[str]]]:
    """Inline code spans that quote options (``--by passes_to_target``, ``ls --campaign``)."""
    out = []
    for path in DOCS:
        for n, line in enumerate(path.read_text().splitlines(), 1):
            for m in re.finditer(r"`([^`]+)`", line):
                words = m.group(1).split()
                if words and (words[0].startswith("--") or (words[0] in COMMANDS and len(words) > 1
                                                              and words[1].startswith("--"))):
                    out.append((f"{path.relative_to(REPO)}:{n}", m.group(1), words))
    return out


@pytest.mark.parametrize("where,text,words", inline_options(), ids=lambda v: v if isinstance(v, str) else "")
def test_every_quoted_option_belongs_to_a_command(where, text, words):
    opt = words[0].split("=")[0] if words[0].startswith("--") else None
    if opt in FOREIGN_OPTIONS:
        return
    if words[0] in COMMANDS:
        _check_options(words[0], ["stopwise", *words], where)
        return
    subs = [s for s in [*COMMANDS, "datasets fetch"] if opt in options_of(s)]
    assert subs, f"{where}: `{text}` quotes {opt}, which no stopwise command takes (add it to FOREIGN_OPTIONS " \
                 "with the reason if it belongs to another program)"
    value = words[1] if len(words) > 1 else (words[0].partition("=")[2] or "")
    choices = [options_of(s)[opt] for s in subs]
    if value and not value.isupper() and all(c is not None for c in choices):
        assert any(value in c for c in choices), f"{where}: {opt} {value!r} is not one of {choices}"


def python_blocks() -> list[tuple[Path, list[tuple[int, str]]]]:
    out = []
    for path in DOCS:
        text = path.read_text()
        blocks = [(text[:m.start()].count("\n") + 2, m.group(1))
                  for m in re.finditer(r"^```python\n(.*?)^```", text, re.S | re.M)]
        if blocks:
            out.append((path, blocks))
    return out


@pytest.mark.parametrize("path,blocks", python_blocks(), ids=lambda v: v.name if isinstance(v, Path) else "")
def test_python_blocks_run(path, blocks, quick_folder, monkeypatch, openml_cache):
    monkeypatch.chdir(quick_folder)
    namespace: dict = {"__name__": "__docs__"}
    for line, code in blocks:
        exec(compile(code, f"{path.relative_to(REPO)}:{line}", "exec"), namespace)  # noqa: S102

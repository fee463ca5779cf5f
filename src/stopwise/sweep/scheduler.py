"""The scheduler's repeated messages, shown once per sweep.

While `stopwise sweep` waits for a SLURM job array, submitit polls the queue with ``sacct``
(every 2 s at first, then less and less often). On a cluster without an accounting store
(a single-node SLURM, some small sites) every poll repeats two messages:

- ``sacct`` itself writes ``Slurm accounting storage is disabled`` to the standard error it
  inherits from the `stopwise` process, and
- submitit logs ``Call #N - Bypassing sacct error Command '[...]' returned non-zero exit
  status 1., status may be inaccurate.`` (on its logger ``submitit``, whose handlers write
  every warning to both stdout and stderr).

`quiet_repeats()` (called once at the start of `campaign.launch`) makes each distinct
message appear once per sweep, on stderr: a filter on submitit's logger drops a warning whose
text, call counter aside, was already shown, and keeps warnings off the stdout handler
(the stderr one shows them); each poll's own standard error (the ``sacct`` child's) is
collected and every distinct line is written once. Messages that differ are all shown; nothing
outside submitit's logger and its queue polls is filtered.

The same watcher asks ``squeue`` about the jobs ``sacct`` says nothing of (see
`_quiet_watcher_class`), so that a task stopped at its time limit without a result ends the
wait instead of holding the submitting process forever.
"""
from __future__ import annotations

import functools
import importlib.abc
import importlib.util
import logging
import os
import re
import subprocess
import sys
import tempfile
from contextlib import contextmanager
from typing import Iterator

LOGGER = "submitit"
_COUNTER = re.compile(r"^Call #\d+ - ")


class OncePerSweep(logging.Filter):
    """Pass a warning (or worse) of submitit's logger only the first time its text is seen,
    with the poll counter (``Call #N - ``) left out of the comparison.

    >>> f = OncePerSweep()
    >>> rec = lambda msg: logging.LogRecord("submitit", logging.WARNING, "", 0, msg, None, None)
    >>> [f.filter(rec(m)) for m in ("Call #1 - sacct failed", "Call #2 - sacct failed", "other")]
    [True, False, True]
    """

    def __init__(self) -> None:
        super().__init__("")
        self.seen: set[str] = set()

    def filter(self, record: logging.LogRecord) -> bool:
        if record.levelno < logging.WARNING:
            return True
        key = _COUNTER.sub("", record.getMessage())
        if key in self.seen:
            return False
        self.seen.add(key)
        return True


class NoWarnings(logging.Filter):
    """On submitit's stdout handler: its warnings go to its stderr handler too."""

    def filter(self, record: logging.LogRecord) -> bool:
        return record.levelno < logging.WARNING


_FILTER = OncePerSweep()
_NO_WARNINGS = NoWarnings()
_SHOWN: set[str] = set()


def quiet_repeats() -> None:
    """Show each distinct scheduler message once from now on (and forget earlier sweeps'),
    and let submitit's SLURM watcher ask ``squeue`` when ``sacct`` does not answer.

    submitit is not imported here: it configures its logger when it is first imported, and
    Hydra's logging set-up (which runs later, inside the multirun) would silence a logger
    that already exists. So submitit's SLURM module is patched right after Hydra's launcher
    imports it (or now, if it is already imported)."""
    _FILTER.seen.clear()
    _SHOWN.clear()
    log = logging.getLogger(LOGGER)
    if _FILTER not in log.filters:
        log.addFilter(_FILTER)
    module = sys.modules.get(_SLURM_MODULE)
    if module is not None:
        _patch(module)
    elif not any(isinstance(f, _AfterImport) for f in sys.meta_path):
        sys.meta_path.insert(0, _AfterImport())


_SLURM_MODULE = "submitit.slurm.slurm"


class _AfterImport(importlib.abc.MetaPathFinder):
    """Patches submitit's SLURM module once it has been executed (a one-shot import hook)."""

    def find_spec(self, name, path, target=None):
        if name != _SLURM_MODULE:
            return None
        sys.meta_path.remove(self)
        spec = importlib.util.find_spec(name)
        if spec is None or spec.loader is None:
            return spec
        run = spec.loader.exec_module

        def exec_module(module) -> None:
            run(module)
            _patch(module)

        spec.loader.exec_module = exec_module  # type: ignore[method-assign]
        return spec


def _patch(slurm) -> None:
    """Keep submitit's warnings off its stdout handler (its stderr handler shows them) and
    give its SLURM jobs the quiet watcher."""
    for h in logging.getLogger(LOGGER).handlers:  # configured by submitit.core.logger on import
        if getattr(h, "name", None) == "submitit_out" and _NO_WARNINGS not in h.filters:
            h.addFilter(_NO_WARNINGS)
    quiet = _quiet_watcher_class(slurm.SlurmInfoWatcher)
    watcher = slurm.SlurmJob.watcher
    if not isinstance(watcher, quiet):  # jobs it already watches stay registered
        replacement = quiet.__new__(quiet)
        replacement.__dict__.update(watcher.__dict__)
        slurm.SlurmJob.watcher = replacement


def _show_new(text: str) -> None:
    for line in text.splitlines():
        if not line.strip() or line in _SHOWN:
            continue
        _SHOWN.add(line)
        print(line, file=sys.stderr, flush=True)


@contextmanager
def _collect_stderr() -> Iterator[None]:
    """Collect what is written to file descriptor 2 (by a child process, or by this one)
    while the block runs, then show each of its lines not shown before."""
    try:
        sys.stderr.flush()
    except (AttributeError, ValueError):
        pass
    try:
        saved = os.dup(2)
    except OSError:  # no descriptor 2 (a daemonized caller): nothing to collect
        yield
        return
    with tempfile.TemporaryFile() as tmp:
        os.dup2(tmp.fileno(), 2)
        try:
            yield
        finally:
            try:
                sys.stderr.flush()
            except (AttributeError, ValueError):
                pass
            os.dup2(saved, 2)
            os.close(saved)
            tmp.seek(0)
            _show_new(tmp.read().decode(errors="replace"))


ENDED = "ENDED"  # the state given to a job the controller no longer lists (see below)


def squeue_states(job_ids: list[str]) -> dict[str, str] | None:
    """The controller's state of each listed job or array task (``{"12_3": "TIMEOUT", ...}``),
    from ``squeue``; an empty dict when it lists none of them, None when it does not answer."""
    cmd = ["squeue", "--noheader", "--all", "--array", "--states=all", "--format=%i|%T",
           f"--jobs={','.join(sorted(set(job_ids)))}"]
    try:
        res = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
    except (OSError, subprocess.SubprocessError) as e:
        _show_new(f"squeue: {e}")
        return None
    if res.returncode != 0:
        if "Invalid job id" in res.stderr:  # none of them is known any more
            return {}
        _show_new(res.stderr)
        return None
    return dict(line.strip().split("|", 1) for line in res.stdout.splitlines() if "|" in line)


@functools.lru_cache(maxsize=None)
def _quiet_watcher_class(base: type) -> type:
    class QuietWatcher(base):  # type: ignore[misc, valid-type]
        """submitit's SLURM queue watcher, (1) showing each distinct stderr line of its polls
        once, and (2) asking ``squeue`` about the jobs ``sacct`` says nothing of.

        submitit learns that a job has ended from its result file or from ``sacct``. Without
        an accounting store ``sacct`` never answers, so a task that ends without a result
        file (stopped at its time limit, killed for memory, its node lost) would keep the
        submitting process waiting forever. The controller still lists a job for MinJobAge
        seconds after it ended, with its end state (TIMEOUT, FAILED, ...), and a job it no
        longer lists has ended (SLURM lists every pending, requeued or running job), so such
        a job is marked ``ENDED``; submitit then raises for its missing result as it does for
        any task that died, and `stopwise sweep` reports the runs that did not finish."""

        def update(self) -> None:
            with _collect_stderr():
                super().update()
            unknown = [j for j in self._registered - self._finished
                       if self._info_dict.get(j, {"Source": "squeue"}).get("Source") == "squeue"]
            if not unknown:
                return
            states = squeue_states([j.split("_")[0] for j in unknown])
            if states is None:
                return
            for j in unknown:
                self._info_dict[j] = {"JobID": j, "State": states.get(j, ENDED), "Source": "squeue"}
                if self.is_done(j, mode="cache"):
                    self._finished.add(j)

    return QuietWatcher

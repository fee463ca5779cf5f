"""Benchmark 3: recording overhead with every metric recorded at every iterate.

The peer is the solver's own time in the same run (the trace's ``seconds`` column counts
solver time only). Overhead = (run loop time - solver time) / solver time, where the run
loop time is the whole ``execute`` minus the one-time preparation (Gram matrices), which
is reported separately; solver time and recording time are each the best of three runs.
Several cases show where recording is cheap and where it is not:

* a large tall problem whose solver reads X every step (fused path forced, or direct, or
  CGLS) while the recorder uses sufficient statistics (O(d^2) per row): the case the
  target is about;
* the same size of problem with rows in signal order (an integral equation), where the
  NCP statistic is recorded and reads the training rows at every recorded row;
* the same problem on the automatic path, where the solver step is itself O(d^2);
* a wide problem (n < d: no sufficient statistics, every recorded error reads its rows);
* SGD with batch 1, recording every step against 8 rows per data pass;
* the small demo problems, where both sides are a few microseconds of Python;

each with every metric on (``record.residual=true``, the default: the residual statistics
of the residual-based stopping rules; ``residual_dot_prev`` comes from the statistics,
``ncp_distance`` exists only on signal-ordered rows) and with the residual statistics off.

    .venv/bin/python benchmarks/bench_recording.py
"""
from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from _common import blas_threads, machine, spectral_problem  # noqa: E402

import numpy as np  # noqa: E402

from stopwise.running import kernels  # noqa: E402
from stopwise.data import cached_problem  # noqa: E402
from stopwise.running.runner import execute  # noqa: E402
from stopwise.config.compose import spec_from_overrides  # noqa: E402


def measure(label, spec, problem, path="auto", record_path=None, repeat=3):
    """Best of ``repeat`` for the solver time and for the recording time, separately.

    (Choosing the repeat of smallest overhead would favour a repeat whose solver time was
    inflated, by the load or by a first call, and understate the overhead.)
    """
    solver = record = None
    for _ in range(repeat):
        t = time.perf_counter()
        tr = execute(spec, problem, path=path, record_path=record_path)
        total = time.perf_counter() - t
        ev = tr.problem_info["evaluation"]
        s = float(tr.columns["seconds"][-1])
        rec = total - ev["prepare_seconds"] - s
        solver = s if solver is None else min(solver, s)
        record = rec if record is None else min(record, rec)
    rows = len(tr.columns["iteration"])
    print(f"{label:58s} {rows:7d} {solver * 1e3:9.1f} {record * 1e3:9.1f} {100 * record / solver:8.1f}%   "
          f"gradient={ev['gradient']} statistics={','.join(ev['statistics']) or '-'}")


def main() -> None:
    blas_threads()
    print("machine:\n" + machine())
    tall = spectral_problem(50_000, 300, sigma=3.0)  # 30000 training rows x 300: 69 MiB
    # load (or compile) the fused kernels once, so the first case's solver time does not carry it
    for kind in ("rows", "quads"):
        kernels.residual_gradient(np.ones((4, 2)), np.ones(2), np.ones(4), np.empty(4), np.empty(2), kind)
    for residual in ("true", "false"):
        print(f"\nrecord.residual={residual}"
              + ("  (every metric, including the residual statistics)"
                 if residual == "true" else "  (every metric but the residual statistics)"))
        print(f"{'case':58s} {'rows':>7s} {'solver ms':>9s} {'record ms':>9s} {'overhead':>9s}   (target <= 15%)")
        cases(tall, [f"record.residual={residual}"])


def cases(tall, extra) -> None:
    def spec_from(overrides):
        return spec_from_overrides(overrides + extra)

    gd = spec_from(["solver=gd", "budget.iterations=60"])
    measure("tall 30000x300, gd, solver reads X (fused), stats record", gd, tall, "fused", "auto")
    measure("tall 30000x300, gd, solver reads X (direct), stats record", gd, tall, "direct", "auto")
    measure("tall 30000x300, gd, automatic (Gram step, stats record)", spec_from(
        ["solver=gd", "budget.iterations=600"]), tall, "auto")
    measure("tall 30000x300, cgls (reads X), stats record", spec_from(
        ["solver=cgls", "budget.iterations=60"]), tall, "auto")
    wide = spectral_problem(2_000, 4_000, decay=0.5)
    sig_spec = spec_from(["dataset=integral_green", "dataset.params.n=50000", "dataset.params.d=300",
                          "solver=gd", "budget.iterations=60"])
    sig = cached_problem(sig_spec.dataset, sig_spec.split, sig_spec.seed)
    measure("signal rows 30000x300 (integral), gd fused, + NCP if on", sig_spec, sig, "fused", "auto")
    measure("signal rows 30000x300 (integral), cgls, + NCP if on", spec_from(
        ["dataset=integral_green", "dataset.params.n=50000", "dataset.params.d=300", "solver=cgls",
         "budget.iterations=60"]), sig, "auto")
    measure("wide 1200x4000, gd, automatic (fused step, direct record)", gd, wide, "auto")
    sgd = ["solver=sgd", "solver.batch=1", "solver.step_scale=0.5", "budget.iterations=1000000",
           "budget.passes=0.5"]
    measure("tall 30000x300, sgd b=1, record every step", spec_from(sgd[:-1] + ["budget.passes=0.1"]), tall, "auto")
    measure("tall 30000x300, sgd b=1, record 8 rows per pass", spec_from(sgd + ["record.per_pass=8"]),
            tall, "auto")
    for ds in ("diabetes", "illposed"):
        spec = spec_from([f"dataset={ds}", "solver=gd", "budget.iterations=3000"])
        measure(f"demo {ds}, gd, automatic", spec, cached_problem(spec.dataset, spec.split, spec.seed), "auto")


if __name__ == "__main__":
    main()

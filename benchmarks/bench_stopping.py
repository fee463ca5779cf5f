"""Cost of the stopping machinery inside a run, as ratios against the same run without it.

1. Residual statistics (residual_dot_prev, and ncp_distance on signal-ordered rows)
   recorded per iterate: a run with them vs the same run with record.residual=false.
2. Online halting: a run whose halting rule is checked after every recorded iterate but
   never decides (holdout with an unreachable patience) vs the same run without halting.
3. Post-hoc selection: evaluating every rule on a stored trace vs reading that trace.

Run by hand: .venv/bin/python benchmarks/bench_stopping.py
"""
import time

import numpy as np

from stopwise.running.runner import execute
from stopwise.config.compose import spec_from_overrides
from stopwise.stopping.rules import RULES, RuleContext, apply_rule


def best_of(fn, repeat=3):
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return min(out)


def main():
    for ds, iters in (("illposed", 3000), ("diabetes", 3000)):
        base = [f"dataset={ds}", "solver=gd", f"budget.iterations={iters}"]
        plain = spec_from_overrides(base)
        with_metrics = best_of(lambda: execute(plain))
        bare = spec_from_overrides(base + ["record.residual=false"])
        without = best_of(lambda: execute(bare))
        print(f"{ds:9s} {iters} iterations: residual statistics cost x{with_metrics / without:.2f} "
              f"({with_metrics:.3f} s vs {without:.3f} s)")
        halting = spec_from_overrides(base + ["stopping=holdout", "stopping.params.patience=1e9", "stopping.halt=true"])
        t_halt = best_of(lambda: execute(halting))
        print(f"{ds:9s} {iters} iterations: online halting check x{t_halt / with_metrics:.2f} "
              f"({t_halt:.3f} s vs {with_metrics:.3f} s)")
        tr = execute(plain)
        ctx = RuleContext.from_problem_info(tr.problem_info)
        t_rules = best_of(lambda: [apply_rule(n, tr.columns, ctx) for n in RULES], repeat=5)
        print(f"{ds:9s} all {len(RULES)} rules post hoc on a {len(tr.columns['iteration'])}-row trace: "
              f"{t_rules * 1e3:.2f} ms, x{t_rules / with_metrics:.4f} of the run")


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()

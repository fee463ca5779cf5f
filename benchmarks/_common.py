"""Shared helpers of the benchmark scripts: timing and a description of the machine."""
from __future__ import annotations

import os
import platform
import subprocess
import time


_LIMITS: list = []


def blas_threads() -> int:
    """Cap BLAS at ``BENCH_BLAS_THREADS`` threads (default 1) for the rest of the process,
    so that stopwise and its peer run on the same number of threads; returns the count."""
    from threadpoolctl import threadpool_limits

    n = int(os.environ.get("BENCH_BLAS_THREADS", "1"))
    if not _LIMITS:
        _LIMITS.append(threadpool_limits(limits=n, user_api="blas"))
    return n


def best_of(fn, repeat: int = 5, number: int = 1) -> float:
    """Smallest wall time of ``repeat`` measurements of ``number`` calls (seconds per call)."""
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        for _ in range(number):
            fn()
        best = min(best, (time.perf_counter() - t) / number)
    return best


def machine() -> str:
    """CPU model, cores, caches and the BLAS numpy uses (one line each)."""
    import numpy as np
    from threadpoolctl import threadpool_info

    lines = [f"python {platform.python_version()}, numpy {np.__version__}"]
    try:
        out = subprocess.run(["lscpu"], capture_output=True, text=True, timeout=10).stdout
        keep = ("Model name", "CPU(s):", "Thread(s) per core", "L1d", "L2", "L3")
        lines += [" ".join(l.split()) for l in out.splitlines() if l.strip().startswith(keep)]
    except (OSError, subprocess.SubprocessError):
        lines.append(platform.processor() or platform.machine())
    for info in threadpool_info():
        if info.get("user_api") == "blas":
            lines.append(f"BLAS {info.get('internal_api')} {info.get('version')} ({info.get('architecture')}), "
                         f"{info.get('num_threads')} threads")
    if os.environ.get("OPENBLAS_CORETYPE"):
        lines.append(f"OPENBLAS_CORETYPE={os.environ['OPENBLAS_CORETYPE']}")
    return "\n".join("  " + l for l in lines)


def spectral_problem(n: int, d: int, decay: float = 1.0, sigma: float = 1.0, seed: int = 0,
                     parts: tuple[float, float] = (0.2, 0.2)):
    """A least-squares Problem with column scales j^-decay (so the spectrum of X decays and
    the iteration count matters), truth w_j ~ N(0, 1), Gaussian noise sigma; rows split
    into train / validation / test by the fractions ``1 - sum(parts)``, ``parts``."""
    import numpy as np

    from stopwise.problem.problem import Problem

    rng = np.random.default_rng([seed, 0xBE9C])
    scales = np.arange(1, d + 1, dtype=np.float64) ** -decay
    X = rng.standard_normal((n, d)) * scales
    w = rng.standard_normal(d)
    y = X @ w + sigma * rng.standard_normal(n)
    n_val, n_test = int(parts[0] * n), int(parts[1] * n)
    n_tr = n - n_val - n_test
    sl = (slice(0, n_tr), slice(n_tr, n_tr + n_val), slice(n_tr + n_val, n))
    arrays = {}
    for name, s in zip(("train", "val", "test"), sl):
        arrays["X_" + name] = np.ascontiguousarray(X[s])
        arrays["y_" + name] = y[s].copy()
    return Problem(name=f"spectral{n}x{d}", task="regression", w_true=w, noise_level=sigma,
                   noise_kind="gaussian", **arrays)

"""`stopwise run` on a full disk and a read-only results root (real mounts), and its exit
statuses: 0 completed, 2 bad input, 3 diverged, 4 trace not stored."""
import os
import subprocess
import sys
from pathlib import Path

import pytest

import stopwise
from stopwise.results.store import StoreWriteError

RUN = [sys.executable, "-m", "stopwise.cli", "run", "solver=gd", "dataset=illposed", "budget.iterations=300"]


def mount(*args) -> None:
    res = subprocess.run(["mount", *args], capture_output=True, text=True)
    if res.returncode != 0:
        pytest.skip(f"cannot mount here ({res.stderr.strip() or res.returncode}); needs root")


@pytest.fixture
def full_disk(tmp_path):
    if os.geteuid() != 0:
        pytest.skip("mounting a tmpfs needs root")
    d = tmp_path / "small"
    d.mkdir()
    mount("-t", "tmpfs", "-o", "size=64k", "tmpfs", str(d))
    try:
        fill = os.open(d / "fill", os.O_WRONLY | os.O_CREAT)  # fill it, unbuffered
        try:
            while True:
                os.write(fill, b"\0" * 4096)
        except OSError:
            pass
        finally:
            os.close(fill)
        yield d
    finally:
        subprocess.run(["umount", "-l", str(d)])


@pytest.fixture
def read_only(tmp_path):
    if os.geteuid() != 0:
        pytest.skip("a read-only bind mount needs root")
    d = tmp_path / "ro"
    (d / "results").mkdir(parents=True)
    mount("--bind", str(d), str(d))
    try:
        mount("-o", "remount,ro,bind", str(d))
        yield d
    finally:
        subprocess.run(["umount", "-l", str(d)])


def visible(root: Path) -> list[str]:
    runs = root / "runs"
    return sorted(p.name for p in runs.iterdir()) if runs.is_dir() else []


@pytest.mark.parametrize("kind", ["full_disk", "read_only"])
def test_run_that_cannot_store_its_trace_is_one_line_exit_4(kind, request):
    d = request.getfixturevalue(kind)
    root = d / "results"
    res = subprocess.run([*RUN, f"results_root={root}"], capture_output=True, text=True)
    lines = res.stderr.strip().splitlines()
    assert res.returncode == 4, res.stderr[-2000:]
    assert len(lines) == 1 and lines[0].startswith("stopwise: error: could not store the trace"), lines
    assert ("disk is full" in lines[0]) if kind == "full_disk" else ("read-only" in lines[0])
    assert not [n for n in visible(root) if n.endswith(".parquet") and not n.startswith(".")]


def test_the_api_raises_a_project_error_on_a_full_disk(full_disk):
    with pytest.raises(StoreWriteError, match="disk is full") as e:
        stopwise.run(["solver=gd", "dataset=illposed", "budget.iterations=300", f"results_root={full_disk / 'r'}"])
    assert isinstance(e.value, OSError) and isinstance(e.value, stopwise.core.errors.StopwiseError)


def test_exit_statuses_completed_diverged_bad_input(tmp_path):
    root = tmp_path / "results"
    ok = subprocess.run([*RUN, f"results_root={root}"], capture_output=True, text=True)
    assert ok.returncode == 0, ok.stderr[-2000:]
    # 2.5 / L is beyond gradient descent's stability bound 2 / L on a least-squares problem
    div = subprocess.run([*RUN, "solver.step_scale=2.5", f"results_root={root}"], capture_output=True, text=True)
    assert div.returncode == 3 and "diverged" in div.stdout, div.stdout + div.stderr
    bad = subprocess.run([*RUN, "solver.step_scale=-1", f"results_root={root}"], capture_output=True, text=True)
    assert bad.returncode == 2


def test_a_run_that_raises_exits_1_with_its_trace_recording_why(tmp_path):
    # a network of 10^8 hidden units needs 24 GB for its first weights; the address space is
    # capped at 1 GiB above the interpreter's, so the run gets a real MemoryError
    script = (
        "import re, resource, sys\n"
        "import numpy, scipy.linalg, pyarrow.parquet, hydra, sklearn.datasets\n"
        "from stopwise.cli import main\n"
        "vm = int(re.search(r'VmSize:\\s+(\\d+) kB', open('/proc/self/status').read()).group(1)) * 1024\n"
        "resource.setrlimit(resource.RLIMIT_AS, (vm + 2**30, vm + 2**30))\n"
        "sys.exit(main(sys.argv[1:]))\n"
    )
    root = tmp_path / "results"
    res = subprocess.run([sys.executable, "-c", script, "run", "dataset=breast_cancer", "solver=relu_net",
                          "solver.width=100000000", "budget.iterations=5", f"results_root={root}"],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 1, res.stdout + res.stderr
    runs = stopwise.load_runs(root)
    assert list(runs["status"]) == ["failed"] and runs["message"].str.contains("allocate|MemoryError").all()


@pytest.mark.parametrize("errno_name", ["ENOSPC", "EROFS", "EACCES"])
def test_a_write_refused_by_the_system_is_one_line_exit_4_without_root(tmp_path, monkeypatch, capsys, errno_name):
    """Where no tmpfs or bind mount can be made (no root), the same refusal injected at the
    writer: the file system call that writes the trace raises the OSError a full disk, a
    read-only root or a missing permission raises."""
    import errno

    from stopwise.cli import main
    from stopwise.core import files

    code = getattr(errno, errno_name)
    real = files.os.fdopen

    def refusing_fdopen(fd, *a, **k):
        fh = real(fd, *a, **k)

        class Refusing:
            def __enter__(self):
                return self

            def __exit__(self, *exc):
                fh.close()
                return False

            def write(self, data):
                raise OSError(code, os.strerror(code))

            def __getattr__(self, name):
                return getattr(fh, name)

        return Refusing()

    monkeypatch.setattr(files.os, "fdopen", refusing_fdopen)
    monkeypatch.chdir(tmp_path)
    rc = main(["run", "solver=gd", "dataset=illposed", "budget.iterations=30", f"results_root={tmp_path / 'r'}"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 4 and len(err) == 1 and err[0].startswith("stopwise: error: could not store the trace"), err
    assert f"({errno_name})" in err[0]
    assert not [p for p in (tmp_path / "r" / "runs").iterdir() if not p.name.startswith(".")]

"""numba's on-disk kernel cache: damaged files recompile instead of crashing; an unwritable
cache directory still runs."""

import os
import subprocess
import sys

PROBE = """
import numpy as np
from rntn_engine.kernels.adagrad_step import adagrad_l2_step
theta = np.ones(3)
adagrad_l2_step(theta, np.zeros(3), np.full(3, 2.0), 0.0, 0.1, 0.0, True, 0.0)
print(repr(float(theta[0])))
"""


def run_probe(cache_dir):
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache_dir))
    return subprocess.run([sys.executable, "-c", PROBE], env=env, capture_output=True, text=True, timeout=300)


def test_truncated_cache_files_recompile(tmp_path):
    first = run_probe(tmp_path)
    assert first.returncode == 0 and first.stdout.strip() == "0.9"
    files = [p for p in tmp_path.rglob("*") if p.suffix in (".nbi", ".nbc")]
    assert files, "numba wrote no cache files"
    for p in files:
        with open(p, "r+b") as fh:
            fh.truncate(7)
    damaged = run_probe(tmp_path)
    assert damaged.returncode == 0, damaged.stderr
    assert damaged.stdout.strip() == "0.9" and "compiling the kernel again" in damaged.stderr
    again = run_probe(tmp_path)  # the cache was rewritten
    assert again.returncode == 0 and "compiling the kernel again" not in again.stderr


def test_unwritable_cache_directory_still_runs(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    result = run_probe(blocker / "cache")  # cannot be created, even by root
    assert result.returncode == 0, result.stderr
    assert result.stdout.strip() == "0.9"


def test_numba_is_set_up_in_one_place():
    # every compiled function takes its flags from jit_setup.py, which touches no numba internals
    from pathlib import Path

    from rntn_engine import jit_setup

    assert "numba.core" not in Path(jit_setup.__file__).read_text(encoding="utf-8")
    package = Path(jit_setup.__file__).parent
    pasted = [str(p.relative_to(package)) for p in package.rglob("*.py")
              if p.name != "jit_setup.py" and ("njit" in p.read_text(encoding="utf-8")
                                               or "numba.jit" in p.read_text(encoding="utf-8"))]
    assert pasted == []


def test_only_incomplete_pickles_count_as_damaged():
    import pickle

    from rntn_engine.jit_setup import complete_pickles

    index = pickle.dumps("0.68.1") + pickle.dumps((1.5, {"sig": "file.1.nbc"}))  # the two pickles of an index
    assert complete_pickles(index) == 2 and complete_pickles(pickle.dumps(b"x" * 1000)) == 1
    assert complete_pickles(index[:-1]) == -1 and complete_pickles(index[:7]) == -1
    assert complete_pickles(b"not a pickle") == -1 and complete_pickles(b"") == 0

"""What the rlrates plugin costs a session that never uses it.

Writes one tiny test file that knows nothing of rlrates into a temporary
directory, then times ``pytest --collect-only -q`` on it in a fresh interpreter,
with the plugin loaded (through its entry point) and with ``-p no:rlrates``.
Prints the best of five runs of each (interleaved) and their ratio. Byte-code caching is
switched on for the child interpreters (into a temporary prefix, so nothing is
written beside the sources) and one warm-up run per variant is not counted, so
the numbers are those of an installed package, not of recompiling every module.

    python benchmarks/bench_plugin_import.py [--runs 5]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TINY_TEST = "def test_arithmetic():\n    assert 2 + 2 == 4\n"


def session_seconds(args: list[str], cwd: Path, env: dict[str, str]) -> float:
    """Wall-clock seconds of one collect-only session with extra ``args``."""
    command = [sys.executable, "-m", "pytest", "--collect-only", "-q", "-p", "no:cacheprovider", *args]
    started = time.perf_counter()
    done = subprocess.run(command, cwd=cwd, capture_output=True, text=True, env=env)
    elapsed = time.perf_counter() - started
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(command)} exited with {done.returncode}:\n{done.stdout}{done.stderr}")
    return elapsed


def best_times(variants: dict[str, list[str]], cwd: Path, runs: int, env: dict[str, str]) -> dict[str, float]:
    """Best of ``runs`` per variant, the variants interleaved so that background load hits both alike."""
    for args in variants.values():
        session_seconds(args, cwd, env)  # warm-up: writes the byte-code caches
    best = {name: float("inf") for name in variants}
    for _ in range(runs):
        for name, args in variants.items():
            best[name] = min(best[name], session_seconds(args, cwd, env))
    return best


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5, help="sessions per variant; the best is kept (default 5)")
    options = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="rlrates-bench-") as folder:
        root = Path(folder)
        (root / "pytest.ini").write_text("[pytest]\n")  # keep pytest from climbing to another project's config
        (root / "test_tiny.py").write_text(TINY_TEST)
        env = {k: v for k, v in os.environ.items() if k not in ("PYTHONDONTWRITEBYTECODE", "PYTEST_ADDOPTS")}
        env["PYTHONPYCACHEPREFIX"] = str(root / "pycache")
        best = best_times({"enabled": [], "disabled": ["-p", "no:rlrates"]}, root, options.runs, env)
        enabled, disabled = best["enabled"], best["disabled"]
    print(f"collect-only, best of {options.runs}:")
    print(f"  plugin enabled   {enabled * 1000:8.1f} ms")
    print(f"  -p no:rlrates    {disabled * 1000:8.1f} ms")
    print(f"  ratio            {enabled / disabled:8.3f}")


if __name__ == "__main__":
    main()

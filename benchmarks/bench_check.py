"""End to end against ngspice on the same trees: `biastree check` (JSON and
table) vs ngspice `.op` on biastree's own netlist of the plan, plus the
start-up of `import biastree` and `biastree --help`.

    python benchmarks/bench_check.py                 # 1k, 10k, 100k loads
    python benchmarks/bench_check.py 5000 --repeat 3

Plans are random and invented (biastree.generate), written as YAML.  Every
figure is the wall time of a fresh process (interpreter start-up, reading
the plan and writing the output included), best of --repeat; peak memory is
the child's maximum resident set.  ngspice runs `ngspice -b` on the netlist
`biastree netlist` writes (nominal voltages; the netlist is written before
the clock starts).  Ratios: ngspice time / biastree time.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def run(cmd: list[str], stdout: Path | None = None, timeout: float = 900.0) -> tuple[float, float, int]:
    """(wall seconds, peak MB, exit status) of one child process."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = open(stdout, "wb") if stdout else subprocess.DEVNULL
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=out, stderr=subprocess.DEVNULL, stdin=subprocess.DEVNULL, env=env, cwd=ROOT)
    deadline = start + timeout
    while True:
        pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
        if pid:
            break
        if time.perf_counter() > deadline:
            proc.kill()
            os.wait4(proc.pid, 0)
            return float("inf"), 0.0, -1
        time.sleep(0.005)
    wall = time.perf_counter() - start
    if stdout:
        out.close()  # type: ignore[union-attr]
    return wall, usage.ru_maxrss / 1024, os.waitstatus_to_exitcode(status)


def best(cmd: list[str], repeat: int, stdout: Path | None = None, timeout: float = 900.0) -> tuple[float, float]:
    runs = [run(cmd, stdout, timeout) for _ in range(repeat)]
    return min(r[0] for r in runs), max(r[1] for r in runs)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("sizes", nargs="*", type=int, default=[1_000, 10_000, 100_000])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--ngspice-timeout", type=float, default=900.0)
    args = parser.parse_args()
    py = [sys.executable, "-m", "biastree"]
    t_import, _ = best([sys.executable, "-c", "import biastree"], 5)
    t_help, _ = best(py + ["--help"], 5)
    t_bare, _ = best([sys.executable, "-c", "pass"], 5)
    print(f"start-up (best of 5): python alone {t_bare:.3f} s, import biastree {t_import:.3f} s, "
          f"biastree --help {t_help:.3f} s")
    ngspice = shutil.which("ngspice")
    print(f"{'loads':>8} {'mirrors':>8} {'ngspice .op':>12} {'--json':>8} {'peak':>8} {'MB out':>7} {'table':>8} "
          f"{'peak':>8} {'×(json)':>8} {'×(table)':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            plan = Path(tmp) / f"plan{n}.yaml"
            subprocess.run(py + ["generate", str(n), "--seed", str(n), "-o", str(plan)], check=True, cwd=ROOT,
                           env={**os.environ, "PYTHONPATH": str(ROOT)})
            cir = Path(tmp) / f"plan{n}.cir"
            subprocess.run(py + ["netlist", str(plan), "-o", str(cir)], check=True, cwd=ROOT,
                           env={**os.environ, "PYTHONPATH": str(ROOT)})
            mirrors = sum(1 for line in cir.read_text().splitlines() if line.startswith("* mirror "))
            out = Path(tmp) / "out.json"
            t_json, m_json = best(py + ["check", str(plan), "--json"], args.repeat, out)
            size = out.stat().st_size / 1e6
            t_table, m_table = best(py + ["check", str(plan)], args.repeat, Path(os.devnull))
            if ngspice:
                t_spice, _ = best([ngspice, "-b", str(cir)], 1, Path(os.devnull), args.ngspice_timeout)
            else:
                t_spice = float("nan")
            spice = f"{t_spice:>11.2f}s" if t_spice != float("inf") else f">{args.ngspice_timeout:>9.0f}s"
            limit = args.ngspice_timeout if t_spice == float("inf") else t_spice
            more = ">" if t_spice == float("inf") else ""  # ngspice did not finish: a lower bound
            print(f"{n:>8} {mirrors or '?':>8} {spice} {t_json:>7.2f}s {m_json:>6.0f}MB {size:>7.1f} {t_table:>7.2f}s "
                  f"{m_table:>6.0f}MB {more + format(limit / t_json, '.1f'):>7}× {more + format(limit / t_table, '.1f'):>8}×",
                  flush=True)
    print(f"({os.cpu_count()} cores; biastree best of {args.repeat}, ngspice one run)")


if __name__ == "__main__":
    main()

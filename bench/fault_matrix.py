"""The fault matrix on the simulated bench, with many clean seeds (not part of the suite).

Run: ``.venv/bin/python bench/fault_matrix.py [--seeds 10] [--dies 3]``. Prints the
catch rate (every contact fault kind on every sequence site of the demo plan: lifted
tips on the first die, high contact resistance and a skating ground on the second)
and the false-FAIL rate of clean runs. The suite runs a smaller version
(tests/test_fault_matrix.py).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests._fault_matrix import fault_matrix  # noqa: E402


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=10, help="clean seeds (default 10)")
    ap.add_argument("--dies", type=int, default=3, help="dies per clean run (default 3)")
    ap.add_argument("--fault-seed", type=int, default=3)
    args = ap.parse_args()
    t0 = time.monotonic()
    m = fault_matrix(seed=args.fault_seed, clean_seeds=tuple(range(args.seeds)), clean_dies=args.dies)
    caught = sum(m.caught.values())
    print(f"faults caught: {caught}/{len(m.caught)} ({100.0 * caught / max(len(m.caught), 1):.1f} %)")
    for (kind, site), ok in sorted(m.caught.items()):
        if not ok:
            print(f"  missed {kind} on {site}")
    print(f"clean landings: {m.clean_landings}, FAIL: {len(m.clean_fails)} "
          f"({100.0 * len(m.clean_fails) / max(m.clean_landings, 1):.2f} %); "
          f"cals accepted {m.clean_cals_accepted}/{m.clean_cals}")
    for line in m.clean_fails:
        print(f"  {line}")
    print(f"{time.monotonic() - t0:.0f} s")
    return 0 if caught == len(m.caught) and not m.clean_fails else 1


if __name__ == "__main__":
    raise SystemExit(main())

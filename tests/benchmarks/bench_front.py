"""Front benchmark: `tradewise front` against a plain pandas + moocore script, in one run.

For 10^5 and 10^6 random rows with two and three objectives (the third maximised) and two other
columns, both sides start a fresh Python process, read the CSV, keep the non-dominated rows and
write them as CSV; the command also checks every value and writes the JSON metadata. Prints the
median wall time of each side over the repeats and their ratio (target: at most 2).

Run:  python tests/benchmarks/bench_front.py [--repeats 3] [--quick]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

BASELINE = """
import sys
import moocore
import pandas as pd
path, out, m = sys.argv[1], sys.argv[2], int(sys.argv[3])
table = pd.read_csv(path)
columns = ["f1", "f2", "f3"][:m]
mask = moocore.is_nondominated(table[columns].to_numpy(dtype=float), maximise=[False, False, True][:m])
table[mask].to_csv(out, index=False)
"""


def write_table(path: Path, n: int, m: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    table = pd.DataFrame({"id": np.arange(n), "x": rng.random(n)})
    for j in range(m):
        table[f"f{j + 1}"] = rng.random(n)
    table.to_csv(path, index=False)


def timed(command: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(command, check=True, capture_output=True)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--quick", action="store_true", help="10^5 rows only")
    args = parser.parse_args()
    sizes = [10**5] if args.quick else [10**5, 10**6]
    print(f"{'rows':>9} {'m':>2} {'front':>6} {'tradewise s':>12} {'baseline s':>11} {'ratio':>6}")
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        for n in sizes:
            for m in (2, 3):
                data = folder / f"rows-{n}-{m}.csv"
                write_table(data, n, m, seed=n + m)
                senses = ["--min", "f1", "--min", "f2"] + (["--max", "f3"] if m == 3 else [])
                ours = [
                    sys.executable,
                    "-m",
                    "tradewise.cli",
                    "front",
                    str(data),
                    *senses,
                    "--out",
                    str(folder / "ours.csv"),
                ]
                plain = [
                    sys.executable,
                    "-c",
                    BASELINE,
                    str(data),
                    str(folder / "plain.csv"),
                    str(m),
                ]
                times_ours, times_plain = [], []
                for _ in range(args.repeats):
                    times_plain.append(timed(plain))
                    times_ours.append(timed(ours))
                kept_ours = pd.read_csv(folder / "ours.csv")["id"].sort_values().tolist()
                kept_plain = pd.read_csv(folder / "plain.csv")["id"].sort_values().tolist()
                if kept_ours != kept_plain:
                    raise SystemExit(f"the two sides disagree on {n} rows x {m} objectives")
                a, b = statistics.median(times_ours), statistics.median(times_plain)
                print(f"{n:>9} {m:>2} {len(kept_ours):>6} {a:>12.2f} {b:>11.2f} {a / b:>6.2f}")


if __name__ == "__main__":
    main()

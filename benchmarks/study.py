"""Design-study throughput: the same 40-design study on 1 local worker, 2 local workers and a
2-worker Dask LocalCluster (loopback), side by side in one run.

    python benchmarks/study.py            # print
    python benchmarks/study.py --readme   # and rewrite the block in README.md

Prints wall times and the speed-up of each over the single worker, and checks that the three
tables agree row for row (wall times aside).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

from readme_block import replace_block

from refine import study

ROOT = Path(__file__).resolve().parent.parent
STUDY = f'''name = "benchmark study, 40 designs"
base = "{ROOT / "problems/studies/base-alumina-10g.toml"}"
[axes]
"response.fractional_bandwidth" = [0.01, 0.02, 0.03, 0.05, 0.08]
"response.order" = [3, 5]
"fab.min_gap" = ["10 um", "25 um"]
"coupling.external" = ["gap", "tap"]
'''


def main() -> int:
    from distributed import Client, LocalCluster

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "study.toml"
        path.write_text(STUDY)
        st = study.load_study(path)
        times, frames = {}, {}
        for label, kwargs in (
            ("1 local worker", {"workers": 1}),
            ("2 local workers", {"workers": 2}),
        ):
            t0 = time.perf_counter()
            frames[label] = study.run_study(st, Path(tmp) / label.replace(" ", "-"), **kwargs)
            times[label] = time.perf_counter() - t0
        with (
            LocalCluster(
                n_workers=2,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
            ) as cluster,
            Client(cluster) as client,
        ):
            t0 = time.perf_counter()
            frames["Dask LocalCluster, 2 workers"] = study.run_study(
                st, Path(tmp) / "dask", client=client
            )
            times["Dask LocalCluster, 2 workers"] = time.perf_counter() - t0
    base = times["1 local worker"]
    ref = frames["1 local worker"].drop(columns=["wall_time_s"]).to_dict("records")
    parts = []
    all_same = True
    for label, t in times.items():
        same = frames[label].drop(columns=["wall_time_s"]).to_dict("records") == ref
        all_same &= same
        print(f"{label:<30} {t:7.1f} s   speed-up {base / t:4.2f}x   rows identical: {same}")
        parts.append(f"{label} {t:.1f} s" + ("" if t == base else f" ({base / t:.2f}×)"))
    if "--readme" in sys.argv[1:]:
        line = (
            "`python benchmarks/study.py --readme` (the 40-design study, side by side in one "
            f"run): {', '.join(parts)}; rows " + ("identical." if all_same else "NOT identical.")
        )
        replace_block("study-speed", line)
    return 0


if __name__ == "__main__":
    sys.exit(main())

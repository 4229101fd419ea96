"""The README's gap-calibration table, from the fixture (no engine run).

    python benchmarks/em_gaps_table.py            # print it
    python benchmarks/em_gaps_table.py --readme   # and rewrite the README block

Each row: a fixture gap (its geometry, W/h and s/W), the field solver's extrapolated series
capacitance and its value on each mesh, each closed-form model's relative error against it,
then the same for the shunt capacitance. ``python -m refine.fullwave.calibration`` regenerates
the fixture itself (about 35 minutes of engine time).
"""

from __future__ import annotations

import argparse
import sys

from readme_block import replace_block

from refine.physics.gap_fixture import comparison, load_fixture


def table() -> str:
    fx = load_fixture()
    out = [
        "| geometry | W/h | s/W | EM Cg (fF) | Cg per mesh (edge cell) | Garg–Bahl Cg | KJK Cg "
        "| EM Cp (fF) | Garg–Bahl Cp | KJK Cp |",
        "|---|---|---|---|---|---|---|---|---|---|",
    ]
    for rec, row in zip(fx.records, comparison(fx), strict=True):
        g = row["geometry"]
        meshes = " / ".join(f"{m['c_series'] * 1e15:.1f}" for m in rec["meshes"])
        cells = "/".join(f"{m['edge_cell'] * 1e6:g}" for m in rec["meshes"])
        gb, kjk = row["models"]["garg-bahl"], row["models"]["kirschning-jansen-koster"]
        out.append(
            f"| εr {g.eps_r:g}, h {g.height * 1e3:g}, W {g.width * 1e3:g}, s {g.gap * 1e3:g} mm "
            f"| {g.width / g.height:.2f} | {g.gap / g.width:.2f} | {row['em'][0] * 1e15:.2f} "
            f"| {meshes} ({cells} µm) | {100 * gb[0]:+.1f} % | {100 * kjk[0]:+.1f} % "
            f"| {row['em'][1] * 1e15:.2f} | {100 * gb[1]:+.0f} % | {100 * kjk[1]:+.0f} % |"
        )
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--readme", action="store_true", help="rewrite the README block")
    args = ap.parse_args(argv)
    text = table()
    print(text)
    if args.readme:
        stamp = "`python benchmarks/em_gaps_table.py --readme` wrote this table from the fixture"
        replace_block("gap-calibration", f"{stamp}:\n\n{text}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Pictures: the response against the mask, and the layout to scale.

The mask is drawn as shaded forbidden regions: above -RL on |S11| across the passband, above
-rejection on |S21| across each stopband.
"""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from refine.circuit.layout import Layout
from refine.outputs.export import copper, write_atomic
from refine.spec.mask import Mask


def _save(fig, path: str | Path, dpi: int) -> Path:
    """Write ``fig`` as a PNG atomically and release it."""
    import matplotlib.pyplot as plt

    try:
        return write_atomic(path, lambda tmp: fig.savefig(tmp, format="png", dpi=dpi))
    finally:
        plt.close(fig)


def _db(x: NDArray) -> NDArray:
    return 20.0 * np.log10(np.maximum(np.abs(x), 1e-15))


def _shade_mask(ax, mask: Mask, bottom: float) -> None:
    ghz = 1e-9
    if mask.min_return_loss_db is not None:
        ax.fill_between(
            [mask.passband_start * ghz, mask.passband_stop * ghz],
            -mask.min_return_loss_db,
            5,
            color="tab:red",
            alpha=0.15,
            lw=0,
            label="forbidden for |S11| (passband)",
        )
    for k, sb in enumerate(mask.stopbands):
        ax.fill_between(
            [max(sb.start, 1.0) * ghz, sb.stop * ghz],
            -sb.rejection_db,
            5,
            color="tab:purple",
            alpha=0.12,
            lw=0,
            label="forbidden for |S21| (stopbands)" if k == 0 else None,
        )
    if mask.max_insertion_loss_db is not None:
        ax.plot(
            [mask.midband * ghz],
            [-mask.max_insertion_loss_db],
            "v",
            color="tab:red",
            label="midband loss limit",
        )


def response_png(
    path: str | Path,
    f: NDArray,
    s_refined: NDArray,
    s_seed: NDArray | None,
    mask: Mask,
    title: str,
    status: str,
    labels: tuple[str, str] = ("refined", "closed-form seed"),
) -> Path:
    """|S21|, |S11| in dB with the mask; seed dashed, refined solid; second panel on the passband.

    labels names the solid and the dashed curves (the field-solver overlay passes
    ("field solver", "circuit model")).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    ghz = f * 1e-9
    fig, axes = plt.subplots(
        1, 2, figsize=(12, 4.6), gridspec_kw={"width_ratios": [1.6, 1]}, layout="constrained"
    )
    lo, hi = mask.passband_start, mask.passband_stop
    span = hi - lo
    zoom = (f >= lo - 1.5 * span) & (f <= hi + 1.5 * span)
    for ax, sel, name in ((axes[0], slice(None), "full sweep"), (axes[1], zoom, "passband")):
        bottom = -80 if name == "full sweep" else -40
        _shade_mask(ax, mask, bottom)
        if s_seed is not None:
            ax.plot(
                ghz[sel],
                _db(s_seed[sel, 1, 0]),
                "--",
                color="tab:blue",
                lw=1,
                label=f"|S21| {labels[1]}",
            )
            ax.plot(
                ghz[sel],
                _db(s_seed[sel, 0, 0]),
                "--",
                color="tab:orange",
                lw=1,
                label=f"|S11| {labels[1]}",
            )
        ax.plot(
            ghz[sel],
            _db(s_refined[sel, 1, 0]),
            color="tab:blue",
            lw=1.8,
            label=f"|S21| {labels[0]}",
        )
        ax.plot(
            ghz[sel],
            _db(s_refined[sel, 0, 0]),
            color="tab:orange",
            lw=1.8,
            label=f"|S11| {labels[0]}",
        )
        ax.set_ylim(bottom, 2)
        ax.set_xlim(ghz[sel][0], ghz[sel][-1])
        ax.set_xlabel("frequency (GHz)")
        ax.set_ylabel("dB")
        ax.grid(True, alpha=0.3)
        ax.set_title(name)
    axes[0].legend(loc="lower left", fontsize=7)
    fig.suptitle(f"{title} — {status}", fontsize=11)

    return _save(fig, path, 120)


def layout_png(path: str | Path, layout: Layout, title: str) -> Path:
    """The copper to scale (millimetres) with the gaps, lengths and widths labelled."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.patches import Rectangle

    strips = copper(layout)
    fig, ax = plt.subplots(figsize=(12, 3.8), layout="constrained")
    for st in strips:
        ax.add_patch(
            Rectangle(
                (st.x0 * 1e3, st.y0 * 1e3),
                (st.x1 - st.x0) * 1e3,
                (st.y1 - st.y0) * 1e3,
                color="#b87333",
            )
        )
    res = [s for s in strips if s.name.startswith("resonator")]
    top = max(s.y1 for s in strips) * 1e3
    for j, s in enumerate(res):
        ax.text(
            (s.x0 + s.x1) / 2 * 1e3,
            s.y1 * 1e3 + 0.15 * top + 0.05,
            f"L{j + 1} {layout.lengths[j] * 1e3:.3f}\nW {layout.widths[j] * 1e3:.3f}",
            ha="center",
            va="bottom",
            fontsize=7,
        )
    chain = sorted([s for s in strips if s.y0 < 0 < s.y1], key=lambda s: s.x0)
    first_gap = layout.external.first_gap
    k = 0
    for a, b in itertools.pairwise(chain):
        if b.x0 > a.x1 + 1e-12:
            ax.annotate(
                f"s{k + first_gap}\n{(b.x0 - a.x1) * 1e6:.1f} um",
                (((a.x1 + b.x0) / 2) * 1e3, -top),
                ha="center",
                va="top",
                fontsize=7,
                color="tab:blue",
            )
            k += 1
    if layout.taps is not None:
        ax.text(
            strips[-2].x0 * 1e3,
            strips[-2].y0 * 1e3,
            f"tap {layout.taps[0] * 1e3:.3f} from open end",
            fontsize=7,
            va="top",
        )
    xs = [v for s in strips for v in (s.x0, s.x1)]
    ys = [v for s in strips for v in (s.y0, s.y1)]
    ax.set_xlim(min(xs) * 1e3 - 0.5, max(xs) * 1e3 + 0.5)
    ax.set_ylim(min(ys) * 1e3 - 3 * top, max(ys) * 1e3 + 4 * top)
    ax.set_aspect("equal")
    ax.set_xlabel("mm")
    ax.set_title(f"{title} — copper to scale, dimensions in mm unless marked", fontsize=10)

    return _save(fig, path, 130)


def yield_png(
    path: str | Path, margins: NDArray, nominal: float, title: str, subtitle: str
) -> Path:
    """Histogram of the Monte Carlo worst margins with the pass line and the nominal design."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(8, 4.2), layout="constrained")
    ax.hist(margins, bins=60, color="tab:blue", alpha=0.8)
    ax.axvline(0.0, color="tab:red", lw=1.5, label="mask limit (0 dB)")
    ax.axvline(nominal, color="black", lw=1, ls="--", label=f"nominal design {nominal:+.2f} dB")
    ax.set_xlabel("worst margin against the mask (dB)")
    ax.set_ylabel("samples")
    ax.set_title(f"{title}\n{subtitle}", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(True, alpha=0.3)

    return _save(fig, path, 120)


def study_pngs(out: str | Path, frame, title: str) -> list[Path]:
    """The two study pictures.

    ``study-return-loss.png``: worst passband return-loss margin of the closed-form seed (dashed)
    and of the refined design (solid) against fractional bandwidth, one curve per order,
    coupling and minimum gap: the narrow-band error of the closed form and what refining recovers.
    ``study-feasibility.png``: the largest fractional bandwidth that meets the mask under the fab
    rules, against the minimum gap, for gap and tapped coupling (one line per order).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    out = Path(out)
    written = []
    fig, ax = plt.subplots(figsize=(8, 4.6), layout="constrained")
    keys = ["order", "external", "min_gap_m"]
    for i, (grp, rows) in enumerate(frame.groupby(keys, dropna=False)):
        rows = rows.sort_values("fbw")
        order, ext, gap = grp
        lab = f"N={order}, {ext}" + (
            "" if gap != gap or gap is None else f", min gap {gap * 1e6:g} um"
        )
        color = f"C{i % 10}"
        ax.plot(rows["fbw"] * 100, rows["seed_return_loss_margin_db"], "--", color=color, lw=1)
        ax.plot(
            rows["fbw"] * 100,
            rows["refined_return_loss_margin_db"],
            "-o",
            color=color,
            ms=3,
            label=lab,
        )
    ax.axhline(0, color="black", lw=0.8)
    ax.set_xlabel("fractional bandwidth (%)")
    ax.set_ylabel("worst passband return-loss margin (dB)")
    ax.set_title(f"{title}: closed-form seed (dashed) vs refined (solid)", fontsize=10)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7)
    written.append(_save(fig, out / "study-return-loss.png", 120))

    fig, ax = plt.subplots(figsize=(8, 4.6), layout="constrained")
    met = frame[frame["status"] == "met"]
    for i, ((order, ext), rows) in enumerate(frame.groupby(["order", "external"])):
        gaps = sorted(rows["min_gap_m"].dropna().unique())
        best = []
        for g in gaps:
            ok = met[(met["order"] == order) & (met["external"] == ext) & (met["min_gap_m"] == g)]
            best.append(ok["fbw"].max() * 100 if len(ok) else 0.0)
        # thicker, fainter lines first, so that series lying on top of each other stay visible
        ax.plot(
            [g * 1e6 for g in gaps],
            best,
            "-o" if ext == "gap" else "--s",
            color=f"C{i % 10}",
            lw=5 - 1.2 * min(i, 3),
            ms=9 - 2 * min(i, 3),
            alpha=0.55 + 0.15 * min(i, 3),
            label=f"N={order}, {ext} coupling",
        )
    ax.set_xlabel("minimum gap of the shop (um)")
    ax.set_ylabel("largest fractional bandwidth met (%)")
    ax.set_title(f"{title}: feasibility under the fab rules", fontsize=10)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7)
    written.append(_save(fig, out / "study-feasibility.png", 120))
    return written

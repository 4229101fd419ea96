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


def passband_png(
    path: str | Path,
    f: NDArray,
    s: NDArray,
    tau: NDArray,
    mask: Mask,
    title: str,
    status: str,
) -> Path:
    """The passband close up: insertion loss and return loss (dB, as positive losses) with
    the mask's requirements, and the group delay (ns, exact from the cascade's frequency
    derivative). ``f`` should span the passband and a little either side."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    ghz = f * 1e-9
    lo, hi = mask.passband_start * 1e-9, mask.passband_stop * 1e-9
    il = -_db(s[:, 1, 0])
    rl = -_db(s[:, 0, 0])
    fig, (a_il, a_rl, a_gd) = plt.subplots(
        3, 1, figsize=(8, 7.5), sharex=True, layout="constrained"
    )
    for ax in (a_il, a_rl, a_gd):
        ax.axvspan(lo, hi, color="0.92", lw=0, label="passband")
        ax.grid(True, alpha=0.3)
    a_il.plot(ghz, il, color="tab:blue", lw=1.8, label="insertion loss")
    inband = (f >= mask.passband_start) & (f <= mask.passband_stop)
    top = float(np.max(il[inband])) if inband.any() else float(np.max(il))
    if mask.max_insertion_loss_db is not None:
        a_il.plot(
            [mask.midband * 1e-9],
            [mask.max_insertion_loss_db],
            "v",
            color="tab:red",
            label=f"midband limit {mask.max_insertion_loss_db:g} dB",
        )
        top = max(top, mask.max_insertion_loss_db)
    if mask.max_ripple_db is not None:
        floor = float(np.min(il[inband])) if inband.any() else 0.0
        a_il.hlines(
            floor + mask.max_ripple_db,
            lo,
            hi,
            colors="tab:red",
            lw=1.2,
            label=f"ripple limit {mask.max_ripple_db:g} dB above the least loss",
        )
        top = max(top, floor + mask.max_ripple_db)
    a_il.set_ylim(max(0.0, float(np.min(il)) - 0.2), 1.5 * top + 0.3)
    a_il.invert_yaxis()
    a_il.set_ylabel("insertion loss (dB)")
    a_il.legend(loc="lower center", fontsize=7)
    a_rl.plot(ghz, rl, color="tab:orange", lw=1.8, label="return loss")
    if mask.min_return_loss_db is not None:
        a_rl.hlines(
            mask.min_return_loss_db,
            lo,
            hi,
            colors="tab:red",
            lw=1.2,
            label=f"required {mask.min_return_loss_db:g} dB",
        )
    a_rl.set_ylim(0, max(40.0, float(np.max(rl[inband])) + 5 if inband.any() else 40.0))
    a_rl.invert_yaxis()
    a_rl.set_ylabel("return loss (dB)")
    a_rl.legend(loc="lower center", fontsize=7)
    a_gd.plot(ghz, tau * 1e9, color="tab:green", lw=1.8, label="group delay")
    a_gd.set_ylabel("group delay (ns)")
    a_gd.set_xlabel("frequency (GHz)")
    a_gd.set_xlim(ghz[0], ghz[-1])
    a_gd.legend(loc="upper center", fontsize=7)
    fig.suptitle(f"{title} — {status}: passband", fontsize=11)
    return _save(fig, path, 110)


def smith_png(path: str | Path, f: NDArray, s11: NDArray, mask: Mask, title: str) -> Path:
    """S11 on a Smith chart (impedance grid: circles of constant normalised resistance and arcs
    of constant reactance), the passband drawn thick, its edges marked."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.2, 6.2), layout="constrained")
    t = np.linspace(0.0, 2.0 * np.pi, 361)
    ax.plot(np.cos(t), np.sin(t), color="0.3", lw=1.0)
    for res in (0.2, 0.5, 1.0, 2.0, 5.0):  # constant resistance: centre r/(1+r), radius 1/(1+r)
        c, rad = res / (1.0 + res), 1.0 / (1.0 + res)
        ax.plot(c + rad * np.cos(t), rad * np.sin(t), color="0.8", lw=0.7)
        ax.text(c - rad, 0.01, f"{res:g}", fontsize=6, color="0.4", ha="right", va="bottom")
    r_axis = np.concatenate([np.linspace(0.0, 10.0, 400), np.geomspace(10.0, 1e4, 100)])
    for x in (0.2, 0.5, 1.0, 2.0, 5.0):  # constant reactance: gamma of z = r + jx for r >= 0
        for sign in (1.0, -1.0):
            z = r_axis + 1j * sign * x
            g = (z - 1.0) / (z + 1.0)
            ax.plot(g.real, g.imag, color="0.8", lw=0.7)
    ax.plot([-1.0, 1.0], [0.0, 0.0], color="0.8", lw=0.7)
    ax.plot(s11.real, s11.imag, color="tab:orange", lw=0.8, label="S11, whole sweep")
    inband = (f >= mask.passband_start) & (f <= mask.passband_stop)
    if inband.any():
        ax.plot(s11[inband].real, s11[inband].imag, color="tab:red", lw=2.2, label="passband")
        for k, mk in ((np.flatnonzero(inband)[0], "o"), (np.flatnonzero(inband)[-1], "s")):
            ax.plot(s11[k].real, s11[k].imag, mk, color="tab:red", ms=5)
    if mask.min_return_loss_db is not None:
        rho = 10 ** (-mask.min_return_loss_db / 20.0)
        ax.plot(
            rho * np.cos(t),
            rho * np.sin(t),
            "--",
            color="tab:green",
            lw=1.0,
            label=f"|S11| for {mask.min_return_loss_db:g} dB return loss",
        )
    ax.set_xlim(-1.05, 1.05)
    ax.set_ylim(-1.05, 1.05)
    ax.set_aspect("equal")
    ax.axis("off")
    ax.legend(loc="lower left", fontsize=7, frameon=False)
    ax.set_title(f"{title}: S11 (circle: passband start, square: its stop)", fontsize=9)
    return _save(fig, path, 110)


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


#: markers and colours cycled at different periods (7 and 10): any 12 series differ in at
#: least one of them, and the pair repeats only after 70
_MARKERS = ("o", "s", "^", "D", "v", "P", "X")


def _series_style(i: int) -> dict:
    return {"color": f"C{i % 10}", "marker": _MARKERS[i % len(_MARKERS)]}


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
    fig, ax = plt.subplots(figsize=(10, 4.8), layout="constrained")
    keys = ["order", "external", "min_gap_m"]
    groups = list(frame.groupby(keys, dropna=False))
    for i, (grp, rows) in enumerate(groups):
        rows = rows.sort_values("fbw")
        order, ext, gap = grp
        lab = f"N={order}, {ext}" + (
            "" if gap != gap or gap is None else f", min gap {gap * 1e6:g} um"
        )
        style = _series_style(i)
        ax.plot(
            rows["fbw"] * 100,
            rows["seed_return_loss_margin_db"],
            ls=(0, (4, 2)),
            color=style["color"],
            lw=1,
            marker=style["marker"],
            ms=3,
            mfc="none",
        )
        ax.plot(
            rows["fbw"] * 100, rows["refined_return_loss_margin_db"], ls="-", lw=1.6, ms=4, **style
        )
        ax.plot([], [], label=lab, ls="-", lw=1.6, ms=4, **style)
    # the two line kinds, once each in the legend
    ax.plot([], [], ls=(0, (4, 2)), color="0.3", lw=1, label="closed-form seed (dashed)")
    ax.plot([], [], ls="-", color="0.3", lw=1.6, label="refined (solid)")
    ax.axhline(0, color="black", lw=0.8)
    ax.set_xlabel("fractional bandwidth (%)")
    ax.set_ylabel("worst passband return-loss margin (dB)")
    ax.set_title(f"{title}: closed-form seed vs refined", fontsize=10)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    written.append(_save(fig, out / "study-return-loss.png", 120))

    fig, ax = plt.subplots(figsize=(10, 4.8), layout="constrained")
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
    # the sweep's limits: nothing above the widest bandwidth swept can show as met, and a 0
    # means "not met at the narrowest bandwidth swept", not "nothing works"
    lo_fbw, hi_fbw = frame["fbw"].min() * 100, frame["fbw"].max() * 100
    ax.axhline(hi_fbw, color="0.4", lw=1, ls=":", label=f"widest swept: {hi_fbw:.3g} %")
    ax.axhline(lo_fbw, color="0.6", lw=1, ls=":", label=f"narrowest swept: {lo_fbw:.3g} %")
    ax.set_xlabel("minimum gap of the shop (um)")
    ax.set_ylabel("largest fractional bandwidth met (%)")
    ax.set_title(f"{title}: feasibility under the fab rules", fontsize=10)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    written.append(_save(fig, out / "study-feasibility.png", 120))
    return written

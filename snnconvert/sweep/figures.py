"""The sweep's figures: the loss heatmap, the Pareto plots and the codings comparison.

Each `*_figure` returns a matplotlib figure drawn from the rows of `tables.table_rows`; the
`plot_*` helpers write it as a PNG through `snnconvert.plots`.
"""

from __future__ import annotations

from pathlib import Path

from snnconvert import plots
from snnconvert.sweep.tables import energy_nj, latency_steps


def loss_scale(losses, tolerance_pp: float):
    """(colour map, norm, bin edges) for losses in pp: a diverging scale that breaks at the tolerance.

    Blues below the tolerance (within it; darker = better than the frame model), reds above it
    (darker = larger loss), in bins [lo, 0, tol] and tol, 1, 2, 5, 10, 20, 50, 100 pp (those above
    tol, up to the largest loss), so 0.3 pp and 3 pp never share a colour.
    """
    import numpy as np
    from matplotlib.colors import BoundaryNorm, ListedColormap
    plt = plots.pyplot()
    vals = [float(v) for v in losses] or [0.0]
    tol, top = float(tolerance_pp), max(vals)
    good = sorted({min(min(vals), -max(tol, 0.5)) - 1e-9, *([0.0] if tol > 0 else []), tol})
    bad = [tol]
    for edge in (1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0):
        if edge > tol and bad[-1] < top:
            bad.append(edge)
    if len(bad) == 1:          # nothing beyond the tolerance: one red bin still shows what red means
        bad.append(max(2 * tol, tol + 1.0))
    elif bad[-1] < top:
        bad.append(top + 1e-9)
    edges = good + bad[1:]
    n_good, n_bad = len(good) - 1, len(bad) - 1
    blues = [plt.cm.Blues(x) for x in np.linspace(0.6, 0.3, n_good)] if n_good else []
    reds = [plt.cm.Reds(x) for x in np.linspace(0.25, 0.9, n_bad)]
    cmap = ListedColormap(blues + reds)
    return cmap, BoundaryNorm(edges, cmap.N), edges


def _grid_groups(rows: list[dict], value):
    """Codings whose grids are equal share one panel: [(codings, {(w, p): value})]."""
    groups: list[tuple[list[str], dict]] = []
    for c in dict.fromkeys(r["coding"] for r in rows):
        grid = {(r["weight_bits"], r["payload_bits"]): value(r) for r in rows if r["coding"] == c}
        for cods, g in groups:
            if g.keys() == grid.keys() and all(abs(g[k] - grid[k]) < 1e-9 for k in g):
                cods.append(c)
                break
        else:
            groups.append(([c], grid))
    return groups


def _is_rec(row: dict, rec: dict) -> bool:
    return bool(rec) and all(rec.get(k) == row.get(k) for k in ("weight_bits", "payload_bits"))


def heatmap_figure(rows: list[dict], frame_accuracy: float, tolerance_pp: float = 0.5,
                   recommendation: dict | None = None, note: str = ""):
    """Loss against the frame model (pp) over weight bits x payload bits on `loss_scale`.

    Cells show spike accuracy and loss; points within tolerance are outlined, the recommended
    point carries a star. Codings with equal accuracy at every point share one panel.
    """
    import numpy as np
    from matplotlib.patches import Rectangle
    plt = plots.pyplot()
    rec = (recommendation or {}).get("point") or {}
    groups = _grid_groups(rows, lambda r: r["loss_pp"])
    acc = {(r["coding"], r["weight_bits"], r["payload_bits"]): 100 * r["spike_accuracy"] for r in rows}
    spread = {(r["coding"], r["weight_bits"], r["payload_bits"]): f" \u00b1{100 * r['spike_accuracy_std']:.1f}"
              for r in rows if isinstance(r.get("spike_accuracy_std"), float)}   # over seeds: one standard deviation
    wb = sorted({r["weight_bits"] for r in rows})
    widths = [max(1.5, len({p for _, p in g})) for _, g in groups]
    cmap, norm, edges = loss_scale([r["loss_pp"] for r in rows], tolerance_pp)
    fig, axes = plt.subplots(1, len(groups), figsize=(2.4 + 1.05 * sum(widths), 1.6 + 0.62 * max(4, len(wb))),
                             squeeze=False, layout="constrained", gridspec_kw={"width_ratios": widths})
    im = None
    for ax, (cods, g) in zip(axes[0], groups):
        pb = sorted({p for _, p in g})
        grid = np.full((len(wb), len(pb)), np.nan)  # (weight bits, payload bits)
        for (w, p), v in g.items():
            grid[wb.index(w), pb.index(p)] = v
        im = ax.imshow(np.ma.masked_invalid(grid), origin="lower", cmap=cmap, norm=norm, aspect="auto")
        for (w, p), v in g.items():
            i, j = wb.index(w), pb.index(p)
            rgb = cmap(norm(v))[:3]
            dark = 0.299 * rgb[0] + 0.587 * rgb[1] + 0.114 * rgb[2] < 0.5
            ax.text(j, i, f"{acc[(cods[0], w, p)]:.1f}{spread.get((cods[0], w, p), '')} %\n{v:+.2f} pp", ha="center", va="center", fontsize=7,
                    color="white" if dark else "black")
            if v <= tolerance_pp + 1e-9:
                ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, ec="black", lw=1.6))
            if rec and rec.get("coding") in cods and _is_rec({"weight_bits": w, "payload_bits": p}, rec):
                ax.add_patch(Rectangle((j - 0.46, i - 0.46), 0.92, 0.92, fill=False, ec="gold", lw=3))
                ax.plot([j + 0.33], [i + 0.3], marker="*", ms=11, color="gold", mec="black", mew=0.8)
        ax.set_xticks(range(len(pb)), [str(p) for p in pb])
        ax.set_yticks(range(len(wb)), [str(w) for w in wb])
        ax.set_xlabel("payload bits")
        ax.set_ylabel("weight bits")
        same = " (equal accuracy at every point)" if len(cods) > 1 else ""
        ax.set_title(" = ".join(cods) + " coding" + same, fontsize=9)
    cb = fig.colorbar(im, ax=axes[0].tolist(), spacing="uniform", ticks=edges[1:-1], shrink=0.9)
    cb.ax.set_yticklabels([f"{e:g}" for e in edges[1:-1]])
    cb.set_label(f"loss against the frame model (pp)\nblue: within {tolerance_pp:g} pp, red: beyond", fontsize=8)
    title = (f"Spike accuracy and loss against the frame model ({100 * frame_accuracy:.2f} %)\n"
             f"outlined: within {tolerance_pp:g} pp;  star: recommended (least weight memory, then fewest SOPs)")
    if note:
        title += "\n" + _wrap(note)
    fig.suptitle(title, fontsize=9)
    return fig


def _wrap(text: str, width: int = 110) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(text, width))


def plot_heatmap(rows: list[dict], frame_accuracy: float, path: Path, tolerance_pp: float = 0.5,
                 recommendation: dict | None = None, note: str = "") -> None:
    """heatmap.png: see heatmap_figure."""
    plots.save_png(heatmap_figure(rows, frame_accuracy, tolerance_pp, recommendation, note), path)


def _si(x, _pos=None) -> str:
    """Tick label without exponents: 30k, 200k, 1.5M."""
    for div, suf in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(x) >= div:
            return f"{x / div:g}{suf}"
    return f"{x:g}"


def label_points(ax, items, fontsize: float = 6.5) -> None:
    """Write text beside points so that no two labels overlap: each (x, y, text) takes the first
    free spot among offsets right/left/above/below at growing distance, with a leader line when
    it lands away from its point. Place it after the axis limits and scales are final."""
    fig = ax.figure
    renderer = fig.canvas.get_renderer()
    taken = []
    offsets = [(4, 2), (4, -9), (-4, 2), (-4, -9)]
    for d in (12, 20, 28, 36, 46, 58):
        offsets += [(6, d), (6, -d - 6), (-6, d), (-6, -d - 6)]
    for x, y, text in sorted(items, key=lambda it: (-it[1], it[0])):
        t = None
        for dx, dy in offsets:
            t = ax.annotate(text, (x, y), xytext=(dx, dy), textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4, ha="left" if dx > 0 else "right")
            box = t.get_window_extent(renderer).expanded(1.05, 1.15)
            inside = ax.get_window_extent(renderer).contains(box.x0, box.y0) and \
                ax.get_window_extent(renderer).contains(box.x1, box.y1)
            if inside and not any(box.overlaps(b) for b in taken):
                break
            t.remove()
            t = None
        if t is None:   # no free spot: the nearest, overlapping
            t = ax.annotate(text, (x, y), xytext=offsets[0], textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4)
            box = t.get_window_extent(renderer)
        elif abs(t.xyann[1]) > 10:
            t.arrow_patch = None
            t.remove()
            t = ax.annotate(text, (x, y), xytext=t.xyann, textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4, ha=t.get_ha(),
                            arrowprops={"arrowstyle": "-", "color": "#999", "lw": 0.5, "shrinkA": 0, "shrinkB": 2})
        taken.append(box)


def _point_label(r: dict, multi: bool) -> str:
    return (r["coding"][0] if multi else "") + f"{r['weight_bits']}/{r['payload_bits']}"


def pareto_figure(rows: list[dict], frame_accuracy: float, tolerance_pp: float, recommendation: dict,
                  note: str = ""):
    """Accuracy against weight memory and against SOPs per sample (and, when the points carry the cost
    model's estimates, against worst latency and energy per sample), zoomed to the band near the
    frame model: from frame - max(5 tol, 2 pp) (lower when even the best point is further down)
    to just above the best point. Points below are left out and counted in the panel titles.
    Each point is labelled weight bits/payload bits."""
    from matplotlib import ticker
    plt = plots.pyplot()
    frame = 100 * frame_accuracy
    tol = float(tolerance_pp)
    accs = [100 * r["spike_accuracy"] for r in rows]
    lo = min(frame - max(5 * tol, 2.0), max(accs) - 1.0)   # the best point is always in view
    hi = max(max(accs), frame) + max(0.4 * tol, 0.3)
    rec = recommendation.get("point") or {}
    multi = len({r["coding"] for r in rows}) > 1
    markers = {"payload": "o", "ttfs": "s", "binary": "^"}
    panels = [("weight_memory_bits", "pareto_memory", "weight memory (bits)"),
              ("sops_per_sample", "pareto_sops", "SOPs per sample")]
    if all(r.get("pareto_latency") is not None for r in rows):   # the cost model's estimates
        panels += [("hardware_summary.latency_us", "pareto_latency", "worst latency per sample (µs, estimate)"),
                   ("hardware_summary.energy_nj", "pareto_energy", "energy per sample (nJ, estimate)")]
    fig, grid = plt.subplots(len(panels) // 2, 2, figsize=(12, 5 * len(panels) // 2), sharey=True, squeeze=False)
    axes = grid.ravel()
    fitting = (recommendation.get("within_budget") or {}).get("point") or {}
    pending = []   # labels are placed once the layout is final
    for ax, (cost, flag, label) in zip(axes, panels):
        ax.axhspan(frame - tol, hi, color="tab:green", alpha=0.13, lw=0, label=f"within {tol:g} pp of the frame model")
        ax.axhline(frame - tol, color="tab:green", lw=1.2)
        ax.axhline(frame, color="k", ls="--", lw=1, label=f"frame model {frame:.2f} %")
        for c in dict.fromkeys(r["coding"] for r in rows):
            pts = [r for r in rows if r["coding"] == c]
            shown = [r for r in pts if 100 * r["spike_accuracy"] >= lo]
            ax.scatter([r[cost] for r in shown], [100 * r["spike_accuracy"] for r in shown], s=26, alpha=0.75,
                       marker=markers.get(c, "o"), label=f"{c} points", zorder=3)
            if shown and all(isinstance(r.get("spike_accuracy_std"), float) for r in shown):   # spread over seeds
                ax.errorbar([r[cost] for r in shown], [100 * r["spike_accuracy"] for r in shown],
                            yerr=[100 * r["spike_accuracy_std"] for r in shown], fmt="none", ecolor="gray",
                            elinewidth=0.8, capsize=2, zorder=2)
        front = sorted((r for r in rows if r[flag]), key=lambda r: r[cost])
        ax.step([r[cost] for r in front], [100 * r["spike_accuracy"] for r in front], where="post",
                color="crimson", lw=1.3, label="Pareto front", zorder=2)
        if rec:
            ax.scatter([rec[cost]], [100 * rec["spike_accuracy"]], marker="*", s=260, color="gold",
                       edgecolors="k", zorder=5, label="recommended")
        if fitting and (recommendation.get("within_budget") or {}).get("limits"):
            ax.scatter([fitting[cost]], [100 * fitting["spike_accuracy"]], marker="D", s=90, facecolors="none",
                       edgecolors="navy", lw=1.6, zorder=6, label="most accurate within budget")
        labels: dict = {}
        for r in rows:
            y = 100 * r["spike_accuracy"]
            if y >= lo:
                labels.setdefault((r[cost], round(y, 3)), []).append(_point_label(r, multi))
        ax.set_ylim(lo - 0.03 * (hi - lo), hi)
        xs = [r[cost] for r in rows if 100 * r["spike_accuracy"] >= lo]
        if min(r[cost] for r in rows) > 0:
            ax.set_xscale("log")
            ax.set_xlim(min(xs) / 1.08, max(xs) * 1.12)
        else:
            pad = 0.05 * (max(xs) - min(xs) or 1.0)
            ax.set_xlim(min(xs) - pad, max(xs) + 2 * pad)
        pending.append((ax, [(x, y, ", ".join(names)) for (x, y), names in labels.items()]))
        if min(r[cost] for r in rows) > 0:
            ax.xaxis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
            ax.xaxis.set_major_formatter(ticker.FuncFormatter(_si))
            ax.xaxis.set_minor_formatter(ticker.NullFormatter())
        ax.set_xlabel(label)
        ax.grid(alpha=0.3)
        n_below = sum(a < lo for a in accs)
        if n_below:
            ax.set_title(f"{n_below} of {len(rows)} points lie below {lo:.1f} % and are left out (the heatmap "
                         "shows every point)", fontsize=8, color="dimgrey")
    for row in grid:
        row[0].set_ylabel("spike accuracy (%)")
        sec = row[1].secondary_yaxis("right", functions=(lambda a: frame - a, lambda l: frame - l))
        sec.set_ylabel("loss against the frame model (pp)")
    handles, labels_ = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels_, loc="lower center", ncol=min(len(labels_), 4), fontsize=8,
               bbox_to_anchor=(0.5, -0.1), frameon=False)
    title = ("Accuracy against hardware cost (counts and cost-model estimates, not measurements); labels: "
             + ("coding initial + " if multi else "") + "weight bits/payload bits")
    if note:
        title += "\n" + _wrap(note, 130)
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    for ax, items in pending:
        label_points(ax, items)
    return fig


def plot_pareto(rows: list[dict], frame_accuracy: float, tolerance_pp: float, recommendation: dict,
                path: Path, note: str = "") -> None:
    """pareto.png: see pareto_figure."""
    plots.save_png(pareto_figure(rows, frame_accuracy, tolerance_pp, recommendation, note), path)


def codings_figure(rows: list[dict], recommendation: dict | None = None, note: str = ""):
    """What differs between codings at equal widths: latency in time steps and estimated energy
    per sample against payload bits, one line per coding, at one weight width (the recommended
    point's, else the widest swept)."""
    from matplotlib import ticker
    plt = plots.pyplot()
    rec = (recommendation or {}).get("point") or {}
    wb = rec.get("weight_bits") or max(r["weight_bits"] for r in rows)
    fig, axes = plt.subplots(1, 2, figsize=(10, 3.6), layout="constrained")
    for c in dict.fromkeys(r["coding"] for r in rows):
        pts = sorted((r for r in rows if r["coding"] == c and r["weight_bits"] == wb), key=lambda r: r["payload_bits"])
        for ax, fn in ((axes[0], latency_steps), (axes[1], energy_nj)):
            xy = [(r["payload_bits"], fn(r)) for r in pts if fn(r) is not None]
            if xy:
                ax.plot(*zip(*xy), marker={"payload": "o", "ttfs": "s", "binary": "^"}.get(c, "o"), label=c)
                for x, y in xy:
                    ax.annotate(f"{y:,.0f}" if ax is axes[0] else f"{y:,.1f}", (x, y), xytext=(5, 3),
                                textcoords="offset points", fontsize=7)
    axes[0].set_ylabel("latency (time steps, input to decision)")
    axes[0].set_yscale("log")
    axes[0].yaxis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
    axes[0].yaxis.set_major_formatter(ticker.FuncFormatter(_si))
    axes[0].yaxis.set_minor_formatter(ticker.NullFormatter())
    axes[1].set_ylabel("energy per sample (nJ, estimate)")
    for ax in axes:
        ax.set_xlabel("payload bits")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
        ax.xaxis.get_major_locator().set_params(integer=True)
    title = (f"What the codings change at weight bits {wb}: latency and energy (energy: estimate from operation "
             "counts, not a measurement)")
    if note:
        title += "\n" + _wrap(note)
    fig.suptitle(title, fontsize=9)
    return fig

"""Charts of results, drawn with matplotlib's Agg backend into PNG files.

Colours follow Favour's own ramp (:data:`favour_plugin.raster.style.RAMP`):
slate for what lowers the favourable ground, rust for what raises it.
"""

from __future__ import annotations

import textwrap

from ..raster.style import RAMP

_LOW, _HIGH = RAMP[0][1], RAMP[-1][1]
_NEUTRAL = RAMP[2][1]


def _pyplot():
    """Return pyplot on the Agg backend (no screen needed), imported only when a chart is drawn."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def tornado_chart(rows: list[dict], path: str, top_percent: float, title: str = "") -> str:
    """Draw the sensitivity table as a tornado chart and save it as a PNG at ``path``.

    One bar per variant (skipped variants and the base tree are left out),
    sorted by the share of the base's top area that changes; bars of a
    weight raised point right (rust), of a weight lowered or a criterion left
    out point left (slate), so the two sides of one node sit on one line.
    With AUC values, a second panel shows the change in AUC.

    Parameters
    ----------
    rows : list of dict
        Rows of :func:`favour_plugin.raster.ensemble_jobs.sensitivity`.
    path : str
        PNG file to write.
    top_percent : float
        The top area the changes refer to, for the axis label.
    title : str
        Chart title.
    """
    plt = _pyplot()
    lines: dict[str, dict] = {}
    for row in rows:
        if row.get("top_area_change_percent") is None or not row.get("node"):
            continue
        line = lines.setdefault(row["node"], {"node": row["node"], "bars": []})
        line["bars"].append(row)
    ordered = sorted(lines.values(), key=lambda line: max(r["top_area_change_percent"] for r in line["bars"]))
    with_auc = any(row.get("auc_change") is not None for row in rows)
    height = max(2.5, 0.42 * len(ordered) + 1.4)
    figure, axes = plt.subplots(1, 2 if with_auc else 1, figsize=(11 if with_auc else 8, height),
                                sharey=True, squeeze=False)
    area_axis = axes[0][0]
    labels = [_short(line["node"]) for line in ordered]
    for y, line in enumerate(ordered):
        for row in line["bars"]:
            raised = "+" in row["change"]
            value = row["top_area_change_percent"] * (1 if raised else -1)
            colour = _HIGH if raised else (_LOW if "weight" in row["change"] else _NEUTRAL)
            area_axis.barh(y, value, color=colour, height=0.7, edgecolor="white")
    area_axis.axvline(0, color="#444444", linewidth=0.8)
    area_axis.set_yticks(range(len(ordered)))
    area_axis.set_yticklabels(labels, fontsize=8)
    area_axis.set_xlabel(f"share of the top {top_percent:g} % of the area that changes (%)\n"
                         "← weight lowered / criterion left out    weight raised →", fontsize=8)
    if with_auc:
        auc_axis = axes[0][1]
        for y, line in enumerate(ordered):
            for row in line["bars"]:
                if row.get("auc_change") is None:
                    continue
                raised = "+" in row["change"]
                colour = _HIGH if raised else (_LOW if "weight" in row["change"] else _NEUTRAL)
                auc_axis.barh(y + (0.18 if raised else -0.18), row["auc_change"], color=colour, height=0.34,
                              edgecolor="white")
        auc_axis.axvline(0, color="#444444", linewidth=0.8)
        auc_axis.set_xlabel("change in AUC of the success-rate curve", fontsize=8)
    handles = [plt.Rectangle((0, 0), 1, 1, color=c) for c in (_HIGH, _LOW, _NEUTRAL)]
    figure.legend(handles, ["weight raised", "weight lowered", "left out"], loc="lower right",
                  fontsize=8, frameon=False, ncol=3)
    if title:
        figure.suptitle(title, fontsize=10)
    figure.tight_layout(rect=(0, 0.04, 1, 0.96))
    figure.savefig(path, format="png", dpi=110)
    plt.close(figure)
    return path


def _short(node: str, width: int = 38) -> str:
    """Return the last two names of a node path, wrapped to fit beside a bar."""
    parts = node.split(" > ")
    return "\n".join(textwrap.wrap(" › ".join(parts[-2:]), width)) or node


#: Resolution of the report's figures (dots per inch).
DPI = 96


def png_bytes(figure) -> bytes:
    """Save a figure as PNG into memory, close it and return the bytes."""
    import io

    plt = _pyplot()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=DPI)
    plt.close(figure)
    return buffer.getvalue()


def rate_curves_png(curves: dict[str, dict], auc: float | None = None,
                    auc_ci: tuple[float, float] | None = None) -> bytes:
    """Draw success-rate and prediction-rate curves; return the PNG's bytes.

    Parameters
    ----------
    curves : dict
        ``{"success_curve" | "prediction_curve": {"area": [...], "deposits": [...]}}``:
        cumulative % of the area (cells ranked from high to low) against
        cumulative % of the deposits.
    auc, auc_ci : float, (float, float), optional
        The success-rate AUC and its bootstrap interval, for the legend.
    """
    plt = _pyplot()
    figure, ax = plt.subplots(figsize=(5.6, 4.6))
    ax.plot([0, 100], [0, 100], color="#9a9a9a", linewidth=0.8, linestyle="--", label="no skill")
    styles = {"success_curve": (_HIGH, "success rate (deposits used)"),
              "prediction_curve": (RAMP[1][1], "prediction rate (held-out deposits)")}
    for name, curve in curves.items():
        colour, label = styles.get(name, (_NEUTRAL, name))
        if name == "success_curve" and auc is not None:
            label += f", AUC {auc:.3f}"
            if auc_ci is not None:
                label += f" ({auc_ci[0]:.3f}–{auc_ci[1]:.3f})"
        elif curve.get("auc"):
            label += f", AUC {curve['auc'][0]:.3f}" if isinstance(curve["auc"], list) else ""
        ax.step(curve["area"], curve["deposits"], where="post", color=colour, linewidth=1.6, label=label)
    ax.set_xlim(0, 100)
    ax.set_ylim(0, 100)
    ax.set_xlabel("area, cells ranked from most to least favourable (cumulative %)", fontsize=8)
    ax.set_ylabel("deposits captured (cumulative %)", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.grid(alpha=0.25, linewidth=0.5)
    ax.legend(fontsize=7, loc="lower right")
    figure.tight_layout()
    return png_bytes(figure)


def prediction_area_png(curve: dict, crossing=None) -> bytes:
    """Draw the prediction–area plot: prediction rate and occupied area against the threshold.

    The occupied area (% of the area at or above each threshold) is drawn
    on an inverted right axis, so the curves cross where P % of the
    deposits lie in (100 − P) % of the area (the prediction–area plot of
    Yousefi & Carranza 2015 [YC15]_); the crossing is marked with P and
    Nd = P / (100 − P).

    Parameters
    ----------
    curve : dict
        ``{"threshold": [...], "prediction": [...], "area": [...]}``, in %.
    crossing : Crossing, optional
        The crossing the validation found (``prediction_percent``,
        ``area_percent``, ``threshold``, ``nd``).
    """
    plt = _pyplot()
    figure, ax = plt.subplots(figsize=(5.6, 4.6))
    ax.plot(curve["threshold"], curve["prediction"], color=_HIGH, linewidth=1.6,
            label="prediction rate (% of deposits)")
    ax.plot(curve["threshold"], [100.0 - a for a in curve["area"]], color=RAMP[1][1], linewidth=1.6,
            label="occupied area (%, right axis)")
    if crossing is not None and crossing.threshold is not None:
        nd = crossing.nd if crossing.nd is not None else \
            crossing.prediction_percent / max(1e-9, 100.0 - crossing.prediction_percent)
        ax.scatter([crossing.threshold], [crossing.prediction_percent], s=40, color="#101010", zorder=5)
        ax.annotate(f"P = {crossing.prediction_percent:.1f} % in {crossing.area_percent:.1f} % of the area\n"
                    f"Nd = {nd:.2f}, threshold {crossing.threshold:.3f}",
                    (crossing.threshold, crossing.prediction_percent), xytext=(8, -28),
                    textcoords="offset points", fontsize=7)
    ax.set_ylim(0, 100)
    ax.set_xlabel("favourability threshold", fontsize=8)
    ax.set_ylabel("prediction rate (% of deposits at or above)", fontsize=8)
    right = ax.secondary_yaxis("right", functions=(lambda v: 100.0 - v, lambda v: 100.0 - v))
    right.set_ylabel("occupied area (% of the area at or above)", fontsize=8)
    right.tick_params(labelsize=7)
    ax.tick_params(labelsize=7)
    ax.grid(alpha=0.25, linewidth=0.5)
    ax.legend(fontsize=7, loc="center left")
    figure.tight_layout()
    return png_bytes(figure)

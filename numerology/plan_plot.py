"""The picture of a mode plan: sites in the (speed, delay) plane, coloured by the mode that serves them.

Each mode's operating region is drawn as in ``plots`` (panel (a) of
``numerology check --plot``): its rule margins over a grid of speeds and
delays (the evaluation behind :func:`numerology.plots.operating_map`), the
region where every rule passes lightly filled and its edge
(:func:`numerology.plots.edge_segments`) drawn in the mode's colour. The grid takes every other value (SNR, profile
shape, carrier) from the requirement file, so a site with a lower SNR or
another profile can fall inside a region and still need another mode: the
sites' own verdicts are those of the plan, the lines a guide. matplotlib
(the optional ``plot`` extra) is imported only to draw.
"""

from __future__ import annotations

import io

import numpy as np

from .design import pilot_label
from .output import optional_module, output_path, write_atomic
from .plots import KMH, _delay_unit, _evaluate, delay_axis, edge_segments
from .requirements import Requirements
from .sweep import site_environments

#: Colour-blind-safe colours (Okabe & Ito, "Color Universal Design", 2008) and markers, one per mode.
MODE_STYLES = (("#0072B2", "o"), ("#D55E00", "s"), ("#009E73", "^"), ("#CC79A7", "D"), ("#E69F00", "v"),
               ("#56B4E9", "P"), ("#F0E442", "X"), ("#000000", "*"))
#: Grid of each mode's operating map (speeds across, delays up).
GRID = (48, 36)


def site_points(req: Requirements, result):
    """Each site's speed (m/s) and value on the map's delay axis (s), from its own channel."""
    batch = site_environments(req, result.sites, notes=False)
    axis = delay_axis(req)
    delay = batch.rms_delay_spread_s if axis.key == "rms_delay_spread" else batch.max_excess_delay_s
    return np.asarray(batch.speed_mps, dtype=float), np.asarray(delay, dtype=float), axis


def plan_plot_bytes(req: Requirements, result, fmt: str, *, grid=GRID) -> bytes:
    """The plan's picture (sites coloured by mode, each mode's region) as the bytes of a PNG or SVG file.

    Parameters
    ----------
    req : Requirements
    result : numerology.plan.PlanResult
    fmt : {"png", "svg"}
    grid : (int, int)
        Points across and up of each mode's map.

    Needs matplotlib (the ``plot`` extra); the command checks for it before any work.
    """
    speed, delay, axis = site_points(req, result)
    speed_max = 1.15 * max(float(np.max(speed, initial=0.0)), 10 * KMH)
    delay_max = 1.15 * max(float(np.max(delay, initial=0.0)), 1e-7)
    speeds = np.linspace(0.0, speed_max, grid[0])
    delays = np.linspace(delay_max / 1000, delay_max, grid[1])  # a profile cannot be scaled to 0
    maps = [_evaluate(req, mode.design, speeds[None, :], axis, delays[:, None]) for mode in result.modes]
    return _render(result, speed, delay, axis, speeds, delays, maps, fmt)


def write_plan_plot(path, req: Requirements, result, *, grid=GRID) -> None:
    """Draw the plan to a PNG or SVG file, atomically (see :func:`plan_plot_bytes`).

    Raises
    ------
    InputError
        Without matplotlib (install the ``plot`` extra), or for a bad path.
    """
    optional_module("matplotlib", "--plot", "plot")
    target = output_path(str(path), "--plot", (".png", ".svg"), req)
    write_atomic(target, plan_plot_bytes(req, result, target.suffix.lower().lstrip("."), grid=grid))


def _render(result, speed, delay, axis, speeds, delays, maps, fmt) -> bytes:
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    from .units import engineering

    fig = Figure(figsize=(7.5, 6.2), layout="constrained")
    ax = fig.subplots()
    scale, unit = _delay_unit(float(delays[-1]))
    x, y = speeds / KMH, delays / scale
    handles = []
    for k, (mode, normalised) in enumerate(zip(result.modes, maps)):
        colour, marker = MODE_STYLES[k % len(MODE_STYLES)]
        worst = np.clip(np.min(np.stack(list(normalised.values())), axis=0), -1e6, 1e6)
        if worst.max() >= 0:
            ax.contourf(x, y, worst, levels=[0.0, 2e6], colors=[colour], alpha=0.10)
        for _rule, vertices in edge_segments(x, y, normalised):
            ax.plot(vertices[:, 0], vertices[:, 1], color=colour, linewidth=2.0)
        mine = result.site_mode == k
        ax.plot(speed[mine] / KMH, delay[mine] / scale, linestyle="none", marker=marker, markersize=5,
                color=colour, markeredgecolor="white", markeredgewidth=0.5)
        d = mode.design
        handles.append(Line2D([], [], color=colour, marker=marker, linewidth=2.0,
                              label=f"{mode.name}: {engineering(d.subcarrier_spacing_hz, 'Hz')}, CP "
                                    f"{engineering(d.cp_s, 's')}, {pilot_label(d)} ({mode.sites} sites)"))
    unserved = result.site_mode < 0
    if unserved.any():
        ax.plot(speed[unserved] / KMH, delay[unserved] / scale, linestyle="none", marker="x", markersize=6,
                color="black")
        handles.append(Line2D([], [], color="black", marker="x", linestyle="none",
                              label=f"served by no mode ({int(unserved.sum())} sites)"))
    ax.set_xlim(0, x[-1])
    ax.set_ylim(0, y[-1])
    ax.set_xlabel("relative speed (km/h)")
    label = axis.label
    ax.set_ylabel(label.replace(" (", f" ({unit})\n(", 1) if " (" in label else f"{label} ({unit})")
    ax.set_title(f"{len(result.modes)} modes for {result.figures.sites} sites: each site in its serving mode's "
                 "colour;\nlines: where each mode stops passing (other values as in the requirement file)",
                 fontsize=9.5)
    ax.legend(handles=handles, loc="best", fontsize=8, framealpha=0.92)
    ax.grid(True, color="#bbbbbb", linewidth=0.5)
    buffer = io.BytesIO()
    metadata = {"Date": None} if fmt == "svg" else {"Software": None}
    fig.savefig(buffer, format=fmt, dpi=150, metadata=metadata)
    return buffer.getvalue()

"""Drawings of sections and slip surfaces (matplotlib, Agg backend: files only, no screen)."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.collections import LineCollection, PolyCollection  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402

from watch.caution import CAUTION_SHORT  # noqa: E402

#: Fill colours of the materials, in order: the colour-blind-safe palette of Okabe and Ito
#: (2008, "Color Universal Design"), lightened towards white so that lines drawn over the strata
#: stay readable. Blue is left out because it marks water.
STRATA_COLOURS = ("#E69F00", "#009E73", "#F0E442", "#CC79A7", "#D55E00", "#56B4E9", "#999999")
_LIGHTEN = 0.45
WATER_COLOUR = "#0072B2"
SURFACE_COLOUR = "#000000"
#: A second set of water lines (another time): the palette's sky blue.
OTHER_WATER_COLOUR = "#56B4E9"
ALTERNATIVE_COLOUR = "#777777"
#: Approximate width of the drawing area of a 10 inch wide figure [in].
_AXES_WIDTH_IN = 8.8
#: Piezometers on the section drawing: the instrument's line, its tip and its reading.
PIEZOMETER_COLOUR = "#000000"
READING_COLOUR = "#0072B2"
#: Loads (surcharges) on the section drawing.
LOAD_COLOUR = "#7A3E00"
#: Trigger levels: one colour and dash patterns that no series uses, with the level written at
#: the end of each line, so that a trigger never reads as data (in colour or grey print).
TRIGGER_COLOUR = "#D55E00"
TRIGGER_DASHES = ((0, (7, 3)), (0, (7, 2, 1.5, 2)), (0, (2.5, 2.5)))
#: Factors of safety on the design water lines (no live readings): hollow grey squares, never
#: joined to the series of results from readings.
DESIGN_LINES_COLOUR = "#666666"
#: A silence longer than this many typical intervals between points is drawn as a gap (the
#: line stops): common practice for logger plots, no source.
GAP_FACTOR = 3.0


def plot_section(
    section,
    path: Path,
    *,
    surface=None,
    fos: float | None = None,
    method: str | None = None,
    slices=None,
    dpi: int = 150,
    line_label: str = "Water line '{name}'",
    other_lines: dict | None = None,
    other_label: str = "Water line '{name}' (other time)",
    alternatives=(),
    title: str | None = None,
    piezometers=(),
) -> Path:
    """Draw ``section`` with its strata, water lines and an optional slip surface to a PNG.

    Parameters
    ----------
    section : solver.section.Section
    path : Path
        Output file (PNG).
    surface : CircularSurface or PolylineSurface, optional
        Slip surface to draw (section frame).
    fos : float, optional
        Its factor of safety [-], shown in the title with ``method``.
    method : str, optional
    slices : solver.slices.Slices, optional
        Slice table of the surface (one surface); slice boundaries are drawn from the surface
        up to the ground.
    dpi : int
    line_label : str
        Legend label of the section's water lines; ``{name}`` is replaced by the line name.
    other_lines : dict of str to ndarray (k, 2), optional
        A second set of water lines [m] (for example at the season's lowest factor of safety),
        drawn in a lighter blue with markers, labelled with ``other_label``.
    alternatives : sequence of (surface, fos)
        Next-best slip surfaces, drawn thin and grey with their factor of safety [-].
    title : str, optional
        Figure title instead of the default "Section <id>: factor of safety ...".
    piezometers : sequence of dict
        Instruments to draw: ``id``, ``offset`` [m] along the section, ``tip_elevation`` and
        ``collar_elevation`` [m], and ``head_m`` [m], the head of the reading behind the water
        lines (None when there is none). The section's surcharges are always drawn.

    Returns
    -------
    Path
        The file written.
    """
    path = Path(path)
    ground = section.ground
    x_lo, x_hi = ground[0, 0], ground[-1, 0]
    surface_points = _surface_points(surface, section) if surface is not None else None
    y_top = ground[:, 1].max()
    y_bottom = ground[:, 1].min()
    if section.base is not None:
        y_bottom = min(y_bottom, section.base[:, 1].min())
    if surface_points is not None and len(surface_points):
        y_bottom = min(y_bottom, surface_points[:, 1].min())
    height = max(y_top - y_bottom, 1.0)
    y_floor = y_bottom - 0.1 * height

    # Size the figure to the section at true scale so that no band of white is left around it.
    y_ceiling = y_top + 0.15 * height
    aspect = (y_ceiling - y_floor) / max(x_hi - x_lo, 1e-9)
    axes_height = float(np.clip(_AXES_WIDTH_IN * aspect, 1.8, 7.0))
    fig, ax = plt.subplots(figsize=(10, axes_height + 1.5), layout="constrained")
    handles = draw_strata(ax, section, y_floor)
    ax.plot(ground[:, 0], ground[:, 1], color="black", linewidth=1.2)
    if section.base is not None:
        ax.plot(*section.base.T, color="#555555", linewidth=2.0, linestyle="-.")
        handles.append(plt.Line2D([], [], color="#555555", linewidth=2.0, linestyle="-.",
                                  label="Impenetrable base"))
    # One colour for water, a different dash pattern per line, so lines stay apart in grey print.
    dashes = ("--", ":", "-.", (0, (6, 2, 1, 2)))
    for i, line in enumerate(section.water_lines):
        (drawn,) = ax.plot(*line.points.T, color=WATER_COLOUR, linewidth=1.4,
                           linestyle=dashes[i % len(dashes)], label=line_label.format(name=line.name))
        handles.append(drawn)
    for i, (name, points) in enumerate((other_lines or {}).items()):
        points = np.asarray(points, dtype=float)
        # Markers as well as a lighter blue: the two sets stay apart in grey print.
        (drawn,) = ax.plot(*points.T, color=OTHER_WATER_COLOUR, linewidth=1.2,
                           linestyle=dashes[i % len(dashes)], marker="v", markersize=4,
                           markevery=max(1, len(points) // 8), label=other_label.format(name=name))
        handles.append(drawn)
    for alternative, alternative_fos in alternatives:
        points = _surface_points(alternative, section)
        if len(points):
            (drawn,) = ax.plot(*points.T, color=ALTERNATIVE_COLOUR, linewidth=1.0,
                               label=f"Next-best surface (FoS {alternative_fos:.2f})")
            handles.append(drawn)
    if surface_points is not None:
        if slices is not None:
            ax.add_collection(_slice_lines(slices, surface, section))
        (drawn,) = ax.plot(*surface_points.T, color=SURFACE_COLOUR, linewidth=2.2,
                           label="Critical slip surface")
        handles.append(drawn)
        if np.isfinite(getattr(surface, "radius", np.nan)):
            ax.plot(surface.centre_x, surface.centre_y, marker="+", color=SURFACE_COLOUR,
                    markersize=9)

    handles += _draw_loads(ax, section, height)
    handles += _draw_piezometers(ax, piezometers)

    ax.set_xlim(x_lo, x_hi)
    ax.set_ylim(y_floor, y_ceiling)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("Offset along section [m]")
    ax.set_ylabel("Elevation [m]")
    if title is None:
        title = f"Section {section.id}"
        if fos is not None:
            title += f": factor of safety {fos:.2f}" + (f" ({method})" if method else "")
    fig.suptitle(title)
    ax.grid(True, color="#DDDDDD", linewidth=0.5)
    ax.set_axisbelow(True)
    # The legend goes below the drawing, where it can never hide the slope, and the caution
    # below the legend: the layout keeps a band at the foot for both (rows of 8 pt text).
    columns = min(4, len(handles))
    caution_in, row_in = 0.3, 0.2
    legend_in = row_in * -(-len(handles) // max(columns, 1)) + 0.1
    fig.set_figheight(fig.get_figheight() + legend_in)
    height = fig.get_figheight()
    fig.get_layout_engine().set(rect=(0, (caution_in + legend_in) / height, 1,
                                      1 - (caution_in + legend_in) / height))
    fig.legend(handles=handles, loc="lower center", bbox_to_anchor=(0.5, caution_in / height),
               ncols=columns, fontsize=8, frameon=False)
    fig.text(0.5, 0.08 / height, CAUTION_SHORT, ha="center", va="bottom", fontsize=7,
             color="#444444")
    fig.savefig(path, dpi=dpi)
    plt.close(fig)
    return path


def _draw_loads(ax, section, height: float) -> list:
    """Surcharges as a band of downward arrows on the ground, labelled with their pressure."""
    handles = []
    for load in section.surcharges:
        x = np.linspace(load.x_from, load.x_to, max(2, int((load.x_to - load.x_from) / (0.04 * height)) + 1))
        ground = section.ground_elevation(x)
        arrow = 0.06 * height
        for xi, yi in zip(x, ground):
            ax.annotate("", (xi, yi), xytext=(xi, yi + arrow),
                        arrowprops={"arrowstyle": "-|>", "color": LOAD_COLOUR, "linewidth": 0.9})
        ax.plot(x, ground + arrow, color=LOAD_COLOUR, linewidth=1.4)
        ax.annotate(f"{load.pressure:.0f} kPa", (0.5 * (load.x_from + load.x_to), ground.max() + arrow),
                    xytext=(0, 3), textcoords="offset points", ha="center", va="bottom",
                    fontsize=7, color=LOAD_COLOUR)
    if section.surcharges:
        handles.append(plt.Line2D([], [], color=LOAD_COLOUR, linewidth=1.4, marker="v",
                                  markersize=5, label="Surcharge [kPa]"))
    return handles


def _draw_piezometers(ax, piezometers) -> list:
    """Each piezometer as a thin line from collar to tip, its tip as a filled square and the
    head of its reading as an open triangle pointing down, with its id."""
    drawn = [p for p in piezometers if p.get("offset") is not None and p.get("tip_elevation") is not None]
    for p in drawn:
        x, tip = float(p["offset"]), float(p["tip_elevation"])
        collar = float(p.get("collar_elevation") or tip)
        ax.plot([x, x], [tip, collar], color=PIEZOMETER_COLOUR, linewidth=0.8)
        ax.plot(x, tip, marker="s", markersize=5, color=PIEZOMETER_COLOUR, linestyle="none")
        if p.get("head_m") is not None:
            ax.plot(x, float(p["head_m"]), marker="v", markersize=8, markerfacecolor="white",
                    markeredgecolor=READING_COLOUR, markeredgewidth=1.6, linestyle="none")
        # Named at the tip, clear of the loads and labels along the ground.
        ax.annotate(str(p["id"]), (x, tip), xytext=(5, -2), textcoords="offset points",
                    va="top", fontsize=7, color=PIEZOMETER_COLOUR)
    if not drawn:
        return []
    handles = [plt.Line2D([], [], color=PIEZOMETER_COLOUR, linewidth=0.8, marker="s", markersize=5,
                          label="Piezometer and its tip")]
    if any(p.get("head_m") is not None for p in drawn):
        handles.append(plt.Line2D([], [], linestyle="none", marker="v", markersize=8,
                                  markerfacecolor="white", markeredgecolor=READING_COLOUR,
                                  markeredgewidth=1.6, label="Head of the reading used"))
    return handles


def _lighten(colour: str) -> tuple:
    rgb = np.array(matplotlib.colors.to_rgb(colour))
    return tuple(rgb + (1 - rgb) * _LIGHTEN)


def draw_strata(ax, section, y_floor) -> list:
    """Fill every stratum cell with its material's colour; legend handles of the materials."""
    columns = section.columns
    x = columns.x
    polygons, colours = [], []
    used = []
    for j in range(len(x) - 1):
        for layer in range(columns.n_layers):
            top_l, top_r = columns.top_left[j, layer], columns.top_right[j, layer]
            bot_l = max(columns.bottom_left[j, layer], y_floor)
            bot_r = max(columns.bottom_right[j, layer], y_floor)
            if top_l - bot_l <= 0 and top_r - bot_r <= 0:
                continue
            material = int(columns.material[j, layer])
            polygons.append([(x[j], top_l), (x[j + 1], top_r), (x[j + 1], bot_r), (x[j], bot_l)])
            colours.append(_lighten(STRATA_COLOURS[material % len(STRATA_COLOURS)]))
            if material not in used:
                used.append(material)
    ax.add_collection(PolyCollection(polygons, facecolors=colours, edgecolors="none"))
    return [
        Patch(facecolor=_lighten(STRATA_COLOURS[m % len(STRATA_COLOURS)]), edgecolor="#777777",
              label=section.materials[m].name)
        for m in sorted(used)
    ]


def _surface_points(surface, section) -> np.ndarray:
    """Points of the slip surface below the ground, section frame."""
    line = surface.as_polyline(400)
    below = line[:, 1] <= section.ground_elevation(line[:, 0]) + 1e-9
    inside = (line[:, 0] >= section.ground[0, 0]) & (line[:, 0] <= section.ground[-1, 0])
    return line[below & inside]


def _surface_elevation(surface, x) -> np.ndarray:
    if hasattr(surface, "radius"):
        offset = x - surface.centre_x
        return surface.centre_y - np.sqrt(np.maximum(surface.radius**2 - offset**2, 0))
    return np.interp(x, *np.asarray(surface.points).T)


def _slice_lines(slices, surface, section) -> LineCollection:
    """Slice boundaries from the surface up to the ground (section frame)."""
    active = np.asarray(slices.active[0], dtype=bool)
    edges = np.union1d(slices.x_left[0, active], slices.x_right[0, active])
    if slices.mirrored:
        edges = -edges
    bottom = _surface_elevation(surface, edges)
    top = section.ground_elevation(edges)
    segments = [((x, b), (x, t)) for x, b, t in zip(edges, bottom, top)]
    return LineCollection(segments, colors="#333333", linewidths=0.5, alpha=0.7)


def break_at_gaps(times, values, breaks=None, factor: float = GAP_FACTOR):
    """Points of a series with a gap (a NaN point) wherever the data stopped, so that a line
    drawn through them stops there instead of bridging the silence with a straight line.

    Parameters
    ----------
    times : sequence of datetime
        Times of the points (UTC), in order.
    values : sequence of float
    breaks : sequence of bool, optional
        One per interval (``len(times) - 1``): True where the series must break whatever the
        spacing (for example where results that do not belong to the series lie between).
    factor : float
        An interval longer than ``factor`` times the median interval is a gap [-].

    Returns
    -------
    (pandas.DatetimeIndex, numpy.ndarray)
        The times and values with one NaN point inserted in the middle of every gap.
    """
    import pandas as pd

    index = pd.DatetimeIndex(pd.to_datetime(list(times), utc=True))
    data = np.asarray(values, dtype=float)
    if len(index) < 2:
        return index, data
    steps = np.diff(index.asi8).astype(float)
    gap = steps > factor * float(np.median(steps))
    if breaks is not None:
        gap |= np.asarray(breaks, dtype=bool)
    where = np.flatnonzero(gap)
    if not len(where):
        return index, data
    middles = pd.DatetimeIndex(index[where] + (index[where + 1] - index[where]) / 2)
    times_out = index.append(middles)
    values_out = np.concatenate([data, np.full(len(where), np.nan)])
    order = np.argsort(times_out.asi8, kind="stable")
    return times_out[order], values_out[order]


def _draw_triggers(ax, levels: dict[str, float] | None, unit: str, *, label_ends: bool = True) -> None:
    """Trigger levels as horizontal lines in the trigger colour and dashes (never those of a
    series), each with its level written at the right end of the line."""
    for i, (name, value) in enumerate(sorted((levels or {}).items(), key=lambda kv: kv[1])):
        ax.axhline(value, color=TRIGGER_COLOUR, linestyle=TRIGGER_DASHES[i % len(TRIGGER_DASHES)],
                   linewidth=1.1, label=f"Trigger {name} ({value:.2f}{unit})")
        if label_ends:
            ax.annotate(f"{name} {value:.2f}{unit}", (1.0, value), xycoords=("axes fraction", "data"),
                        xytext=(-3, 2), textcoords="offset points", ha="right", va="bottom",
                        fontsize=7, color=TRIGGER_COLOUR)


def fos_history_figure(
    section_id: str,
    times,
    fos,
    *,
    method: str = "",
    rain_times=None,
    rain_mm=None,
    rain_label: str = "Rain\n[mm/day]",
    levels: dict[str, float] | None = None,
    events: dict[str, object] | None = None,
    design_times=(),
    design_fos=(),
    breaks=None,
):
    """The figure of :func:`plot_fos_history` (open; the caller saves and closes it)."""
    has_rain = rain_times is not None and len(rain_times) > 0
    figure, axes = plt.subplots(
        2 if has_rain else 1, 1, figsize=(10, 5.2 if has_rain else 3.8), sharex=True,
        gridspec_kw={"height_ratios": [3, 1]} if has_rain else None, squeeze=False,
    )
    ax = axes[0, 0]
    drawn_times, drawn = break_at_gaps(times, fos, breaks)
    ax.plot(drawn_times, drawn, color="#000000", linewidth=1.4, linestyle="-",
            marker="." if len(fos) < 60 else None, label="Factor of safety (live readings)")
    if len(design_times):
        ax.plot(list(design_times), np.asarray(design_fos, dtype=float), linestyle="none",
                marker="s", markersize=5, markerfacecolor="none", markeredgecolor=DESIGN_LINES_COLOUR,
                label="On design water lines (no live readings): not a result of the readings")
    _draw_triggers(ax, levels, "")
    for label, moment in (events or {}).items():
        ax.axvline(moment, color="#CC79A7", linewidth=1.2)
        ax.annotate(label, (moment, 1.0), xycoords=("data", "axes fraction"),
                    xytext=(4, -12), textcoords="offset points", fontsize=8, color="#000000")
    ax.set_ylabel(f"Factor of safety [-]{f' ({method})' if method else ''}")
    ax.grid(True, color="#dddddd", linewidth=0.6)
    ax.set_title(f"Section {section_id}: factor of safety through the season")
    ax.legend(loc="lower left", fontsize=8, frameon=True)
    if has_rain:
        rain_ax = axes[1, 0]
        rain_ax.bar(rain_times, rain_mm, width=0.9, color=WATER_COLOUR)
        rain_ax.set_ylabel(rain_label)
        rain_ax.grid(True, axis="y", color="#dddddd", linewidth=0.6)
    axes[-1, 0].set_xlabel("Date (UTC)")
    figure.autofmt_xdate()
    figure.text(0.5, 0.005, CAUTION_SHORT, ha="center", va="bottom", fontsize=7, color="#444444")
    figure.tight_layout(rect=(0, 0.03, 1, 1))
    return figure


def plot_fos_history(section_id: str, times, fos, path: Path, *, dpi: int = 150, **options) -> Path:
    """Factor of safety through time, with daily rainfall bars underneath, to a PNG.

    The series of results from live readings is one black line that stops where the data
    stopped (see :func:`break_at_gaps`); results on the design water lines are hollow grey
    squares beside it, never joined to it; trigger levels are dashed lines in their own colour.

    Parameters
    ----------
    section_id : str
    times, fos : sequences
        Times (UTC) and factors of safety [-] of the assessments on live readings.
    path : Path
        Output file (PNG).
    method : str
        Method of slices, for the axis label.
    rain_times, rain_mm : sequences, optional
        Rain per bar (for example daily totals [mm]) at its gauge.
    levels : dict of str to float, optional
        Trigger levels to draw as horizontal lines, by name [-].
    events : dict of str to time, optional
        Marked moments (for example a slip), by label.
    design_times, design_fos : sequences, optional
        Times and factors of safety [-] of results on the design water lines.
    breaks : sequence of bool, optional
        Per interval of ``times``: True where the series must break (results that are not
        from readings lie between).
    """
    return _save(fos_history_figure(section_id, times, fos, **options), path, dpi)


#: Colours of instruments drawn together (Okabe and Ito 2008) with a marker each, all solid
#: lines: the trigger colour and dashes are kept for the trigger levels.
_SERIES_COLOURS = ("#0072B2", "#009E73", "#CC79A7", "#000000", "#56B4E9", "#E69F00")
_SERIES_MARKERS = ("o", "^", "D", "x", "v", "+")


def heads_figure(title: str, series: dict[str, tuple], *, levels: dict[str, float] | None = None):
    """The figure of :func:`plot_heads` (open; the caller saves and closes it)."""
    figure, ax = plt.subplots(figsize=(10, 3.8))
    for i, (name, (times, heads)) in enumerate(series.items()):
        drawn_times, drawn = break_at_gaps(times, heads)
        ax.plot(drawn_times, drawn, color=_SERIES_COLOURS[i % len(_SERIES_COLOURS)], linestyle="-",
                marker=_SERIES_MARKERS[i % len(_SERIES_MARKERS)], markevery=max(1, len(drawn) // 12),
                markersize=4, linewidth=1.2, label=name)
    _draw_triggers(ax, levels, " m")
    ax.set_ylabel("Piezometric head [m]")
    ax.set_xlabel("Date (UTC)")
    ax.set_title(title)
    ax.grid(True, color="#dddddd", linewidth=0.6)
    if series or levels:
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    figure.autofmt_xdate()
    figure.text(0.5, 0.005, CAUTION_SHORT, ha="center", va="bottom", fontsize=7, color="#444444")
    figure.tight_layout(rect=(0, 0.03, 1, 1))
    return figure


def plot_heads(title: str, series: dict[str, tuple], path: Path, *,
               levels: dict[str, float] | None = None, dpi: int = 150) -> Path:
    """Piezometric heads of several instruments through time, with their trigger levels, to a PNG.

    Each instrument is a solid line in its own colour and marker that stops where its readings
    stopped (:func:`break_at_gaps`); trigger levels are dashed lines in the trigger colour.

    Parameters
    ----------
    title : str
    series : dict of str to (times, head_m)
        Per instrument id: reading times (UTC) and heads [m] (elevation of water).
    path : Path
        Output file (PNG).
    levels : dict of str to float, optional
        Trigger levels on head [m] to draw as horizontal lines, by label.
    """
    return _save(heads_figure(title, series, levels=levels), path, dpi)


def plot_fos_trend(times, fos, path: Path, *, window_label: str, levels=None, breaks=None,
                   dpi: int = 110) -> Path:
    """A small trend plot of the factor of safety over a recent window (status board), to a PNG.

    Parameters
    ----------
    times, fos : sequences
        Times (UTC) and factors of safety [-] on live readings inside the window.
    path : Path
    window_label : str
        The window, e.g. "last 24 h"; shown under the plot.
    levels : dict of str to float, optional
        Trigger levels on the factor of safety [-], drawn as thin dashed lines when inside the
        range.
    breaks : sequence of bool, optional
        Per interval: True where the line must stop (see :func:`break_at_gaps`).
    """
    figure, ax = plt.subplots(figsize=(2.8, 1.15))
    drawn_times, drawn = break_at_gaps(times, fos, breaks)
    ax.plot(drawn_times, drawn, color="#000000", linewidth=1.2, marker="." if len(fos) < 30 else None)
    low, high = (float(np.nanmin(fos)), float(np.nanmax(fos))) if len(fos) else (0.0, 1.0)
    pad = max(0.02, 0.15 * (high - low))
    inside = {name: value for name, value in (levels or {}).items() if low - pad <= value <= high + pad}
    _draw_triggers(ax, inside, "", label_ends=False)
    ax.set_ylim(low - pad, high + pad)
    ax.set_ylabel("FoS [-]", fontsize=7)
    ax.set_xlabel(f"{window_label} (UTC)", fontsize=7)
    ax.tick_params(labelsize=6)
    ax.set_xticks([])
    ax.grid(True, axis="y", color="#dddddd", linewidth=0.5)
    figure.tight_layout(pad=0.3)
    return _save(figure, path, dpi)


def _save(figure, path: Path, dpi: int) -> Path:
    path = Path(path)
    figure.savefig(path, dpi=dpi)
    plt.close(figure)
    return path

"""Figures for the run report: small functions, arrays in, a matplotlib Figure out.

Every function builds a :class:`matplotlib.figure.Figure` directly (no pyplot,
so no global figure registry and nothing left open between calls) with
constrained layout, labelled axes with units, and time axes stated in UTC with
automatic date ticks.  Colours come from the Okabe-Ito colour-blind-safe
palette (Okabe, M. and Ito, K., 2008: "Color Universal Design (CUD): how
to make figures and presentations that are friendly to colorblind people";
its RGB values, from memory); each flag class also has its own marker shape, so the
classes stay apart in grey-scale print and for readers who see few colours.

Nothing here reads files or computes science: the caller passes the arrays.
"""

from __future__ import annotations

import io
import threading

import matplotlib

matplotlib.use("Agg", force=False)   # no display needed; harmless when already Agg

import matplotlib.dates as mdates  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402

#: Okabe & Ito (2008), "Color Universal Design": the eight colours of the palette
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: how each aggregate flag class is drawn: (words, colour, marker, marker size in points^2)
FLAG_STYLE: dict[int, tuple[str, str, str, float]] = {
    1: ("pass", OKABE_ITO["bluish_green"], "o", 4.0),
    2: ("not evaluated", OKABE_ITO["sky_blue"], "s", 14.0),
    3: ("suspect", OKABE_ITO["orange"], "^", 26.0),
    4: ("fail", OKABE_ITO["vermillion"], "X", 34.0),
    9: ("missing", OKABE_ITO["reddish_purple"], "|", 60.0),
}

#: colour of emersed (out of water) shading behind a series
EMERSED_COLOUR = OKABE_ITO["yellow"]

TIME_LABEL = "Time (UTC)"

#: above this many samples of one flag class its markers are drawn small and without outline
_CROWDED = 1500


def _figure(width: float = 10.0, height: float = 3.4) -> Figure:
    return Figure(figsize=(width, height), dpi=100, layout="constrained")


def _time_axis(ax) -> None:
    locator = mdates.AutoDateLocator(minticks=4, maxticks=10)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))
    ax.set_xlabel(TIME_LABEL)


def _as_time(times) -> np.ndarray:
    t = np.asarray(times)
    if not np.issubdtype(t.dtype, np.datetime64):
        t = t.astype("datetime64[ns]")
    return t


def _axis_label(name: str, units: str | None) -> str:
    return f"{name} ({units})" if units else name


def _emersed_runs(times: np.ndarray, immersion: np.ndarray) -> list[tuple[np.datetime64, np.datetime64]]:
    """Start and end times of the runs of consecutive emersed (0) samples."""
    dry = np.asarray(immersion) == 0
    if dry.size == 0 or not dry.any():
        return []
    edges = np.diff(np.concatenate(([0], dry.astype(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    return [(times[s], times[e]) for s, e in zip(starts, ends)]


def plot_variable(times, values, agg_flags, *, immersion=None, name: str, units: str | None,
                  title: str) -> Figure:
    """One variable over time, each sample marked by its aggregate flag class.

    Parameters
    ----------
    times : array of datetime64 (UTC)
    values : array of float, same length (NaN where missing)
    agg_flags : array of int, same length: 1 pass, 2 not evaluated, 3 suspect,
        4 fail, 9 missing
    immersion : array of int or None
        1 immersed, 0 emersed, 2 unknown; emersed periods are shaded behind
        the series.
    name, units : str
        Quantity name and units for the y-axis label (``units`` may be empty).
    title : str

    Returns
    -------
    Figure
        One grey line for the series (gid ``"series"``), one marker set per
        flag class present (gid ``"flag-<n>"``); missing samples are drawn as
        ticks along the bottom edge (their value is unknown); emersed runs are
        one rectangle each in a single collection (gid ``"emersed"``).
    """
    t = _as_time(times)
    v = np.asarray(values, dtype=np.float64)
    f = np.asarray(agg_flags).astype(np.int16)
    if not (t.shape == v.shape == f.shape):
        raise ValueError(f"plot_variable: times, values and agg_flags must have one length; found "
                         f"{t.shape}, {v.shape} and {f.shape}")
    fig = _figure()
    ax = fig.add_subplot()
    handles = []
    if immersion is not None:
        imm = np.asarray(immersion)
        if imm.shape != t.shape:
            raise ValueError(f"plot_variable: immersion must match times; found {imm.shape} and {t.shape}")
        runs = _emersed_runs(t, imm)
        if runs:            # one collection for all runs: one draw call however many tides the record holds
            x = mdates.date2num(np.asarray(runs, dtype="datetime64[ns]"))
            shade = PolyCollection([[(a, 0.0), (a, 1.0), (b, 1.0), (b, 0.0)] for a, b in x],
                                   transform=ax.get_xaxis_transform(), facecolors=EMERSED_COLOUR, alpha=0.35,
                                   linewidths=0, zorder=0)
            shade.set_gid("emersed")
            ax.add_collection(shade, autolim=False)
            handles.append(Patch(facecolor=EMERSED_COLOUR, alpha=0.35, label="emersed (out of water)"))
    (line,) = ax.plot(t, v, color="#555555", lw=0.6, alpha=0.7, zorder=1, label="_series")
    line.set_gid("series")
    for flag, (words, colour, marker, size) in FLAG_STYLE.items():
        sel = f == flag
        n = int(np.count_nonzero(sel))
        if n == 0:
            continue
        label = f"{flag} {words} ({n})"
        if flag == 9:
            coll = ax.scatter(t[sel], np.full(n, 0.02), transform=ax.get_xaxis_transform(), marker=marker,
                              s=size, color=colour, linewidths=1.2, zorder=3, label=label)
        else:
            crowded = n > _CROWDED            # many marks: small and without outline, so the series stays readable
            coll = ax.scatter(t[sel], v[sel], marker=marker, s=min(size, 8.0) if crowded else size, color=colour,
                              zorder=2 + flag / 10, edgecolors="black" if flag in (3, 4) and not crowded else "none",
                              linewidths=0.4, label=label)
        coll.set_gid(f"flag-{flag}")
        handles.append(coll)
    ax.set_ylabel(_axis_label(name, units))
    ax.set_title(title, loc="left", fontsize="medium")
    ax.grid(True, color="#dddddd", lw=0.5)
    _time_axis(ax)
    if handles:
        leg = ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize="small",
                        title="aggregate flag", title_fontsize="small", frameon=False)
        for h in leg.legend_handles:          # one readable marker size in the legend, however crowded the plot
            if hasattr(h, "set_sizes"):
                h.set_sizes([40.0])
    return fig


def plot_water_level(times, observed, predicted, *, elevation_m: float | None, datum_name: str,
                     title: str = "Water level") -> Figure:
    """Observed (and predicted) water level with the sensing point's elevation as a line.

    ``predicted`` may be None.  Heights in metres above ``datum_name``.
    Returns a Figure with gids ``"observed"``, ``"predicted"`` and ``"elevation"``.
    """
    t = _as_time(times)
    obs = np.asarray(observed, dtype=np.float64)
    if obs.shape != t.shape:
        raise ValueError(f"plot_water_level: times and observed must have one length; found {t.shape} and "
                         f"{obs.shape}")
    fig = _figure()
    ax = fig.add_subplot()
    (lo,) = ax.plot(t, obs, color=OKABE_ITO["blue"], lw=0.9, label="observed")
    lo.set_gid("observed")
    if predicted is not None:
        pred = np.asarray(predicted, dtype=np.float64)
        if pred.shape != t.shape:
            raise ValueError(f"plot_water_level: predicted must match times; found {pred.shape} and {t.shape}")
        (lp,) = ax.plot(t, pred, color=OKABE_ITO["orange"], lw=0.9, ls="--", label="predicted (harmonic)")
        lp.set_gid("predicted")
    if elevation_m is not None and np.isfinite(elevation_m):
        le = ax.axhline(elevation_m, color=OKABE_ITO["vermillion"], lw=1.4, ls="-.",
                        label=f"sensing point {elevation_m:g} m")
        le.set_gid("elevation")
    ax.set_ylabel(_wrap(f"height above {datum_name} (m)", 32))
    ax.set_title(title, loc="left", fontsize="medium")
    ax.grid(True, color="#dddddd", lw=0.5)
    _time_axis(ax)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize="small", frameon=False)
    return fig


def plot_transition_offsets(offsets_s, *, verdict_text: str, title: str = "Wet/dry transitions against the tide"
                            ) -> Figure:
    """Histogram of per-transition clock offsets (observed minus predicted), in minutes.

    ``verdict_text`` (the clock verdict) is shown in a text box.  NaN offsets
    (transitions with no predicted match) are left out and counted in the box.
    """
    off = np.asarray(offsets_s, dtype=np.float64).ravel()
    ok = np.isfinite(off)
    minutes = off[ok] / 60.0
    fig = _figure(8.0, 3.6)
    ax = fig.add_subplot()
    if minutes.size:
        lo, hi = float(minutes.min()), float(minutes.max())
        width = max(1.0, (hi - lo) / 30.0)
        bins = np.arange(np.floor(lo) - width, np.ceil(hi) + 2 * width, width)
        ax.hist(minutes, bins=bins, color=OKABE_ITO["blue"], edgecolor="white", lw=0.5, gid="offsets")
        ax.axvline(float(np.median(minutes)), color=OKABE_ITO["vermillion"], lw=1.4, ls="--",
                   label=f"median {np.median(minutes):+.1f} min")
    ax.axvline(0.0, color="black", lw=0.8, label="no offset")
    ax.set_xlabel("offset of observed from predicted transition (min; + = logger late)")
    ax.set_ylabel("transitions (count)")
    ax.set_title(title, loc="left", fontsize="medium")
    n_bad = int(np.count_nonzero(~ok))
    box = verdict_text + (f"\n({n_bad} transitions without a predicted match left out)" if n_bad else "")
    ax.text(0.01, 0.97, _wrap(box, 70), transform=ax.transAxes, va="top", ha="left", fontsize="small",
            bbox=dict(boxstyle="round", facecolor="white", edgecolor="#999999", alpha=0.9))
    ax.legend(loc="upper right", fontsize="small", frameon=False)
    return fig


def plot_daily_exposure(days, hours_emersed, max_temp, *, title: str = "Daily exposure") -> Figure:
    """Hours out of water per UTC day (bars) and the day's highest aerial temperature (markers).

    ``max_temp`` may be None or contain NaN (days without aerial temperature).
    Returns a Figure with gids ``"hours"`` (bars) and ``"max-temp"``.
    """
    d = _as_time(days)
    h = np.asarray(hours_emersed, dtype=np.float64)
    if d.shape != h.shape:
        raise ValueError(f"plot_daily_exposure: days and hours_emersed must have one length; found {d.shape} "
                         f"and {h.shape}")
    fig = _figure(10.0, 3.4)
    ax = fig.add_subplot()
    bars = ax.bar(d, h, width=0.8, align="edge", color=OKABE_ITO["sky_blue"], edgecolor=OKABE_ITO["blue"],
                  lw=0.4, label="hours emersed", gid="hours")
    ax.set_ylabel("emersed per day (h)")
    ax.set_ylim(0, 24)
    ax.set_yticks([0, 6, 12, 18, 24])
    ax.set_title(title, loc="left", fontsize="medium")
    ax.grid(True, axis="y", color="#dddddd", lw=0.5)
    _time_axis(ax)
    ax.set_xlabel("Day (UTC)")
    handles = [bars]
    if max_temp is not None:
        mt = np.asarray(max_temp, dtype=np.float64)
        if mt.shape != d.shape:
            raise ValueError(f"plot_daily_exposure: max_temp must match days; found {mt.shape} and {d.shape}")
        ax2 = ax.twinx()
        centre = d + np.timedelta64(12, "h")
        (lt,) = ax2.plot(centre, mt, color=OKABE_ITO["vermillion"], marker="D", ms=4, lw=0.8,
                         label="highest aerial temperature", gid="max-temp")
        ax2.set_ylabel("highest aerial temperature (degC)")
        handles.append(lt)
    fig.legend(handles=handles, loc="outside lower center", ncols=2, fontsize="small", frameon=False)
    return fig


# matplotlib shares font objects between figures: one render at a time per process
_RENDER_LOCK = threading.Lock()


def png_bytes(fig: Figure, *, dpi: int = 100) -> bytes:
    """The figure rendered as PNG bytes (Agg canvas, nothing kept open)."""
    buf = io.BytesIO()
    with _RENDER_LOCK:
        fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _wrap(text: str, width: int) -> str:
    import textwrap

    return "\n".join(textwrap.fill(part, width) for part in text.splitlines())

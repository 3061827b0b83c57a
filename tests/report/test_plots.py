"""The report's figures on small hand-made series: artists, legends, labels, units and UTC."""

from __future__ import annotations

import subprocess
import sys

import matplotlib.dates as mdates
import numpy as np
import pytest
from matplotlib.collections import PathCollection
from matplotlib.colors import to_rgb

from qcpipe.report import plots

T0 = np.datetime64("2026-09-14T00:00:00", "ns")


def times(n, step_min=10):
    return T0 + np.arange(n) * np.timedelta64(step_min, "m")


def legend_texts(fig) -> list[str]:
    texts = []
    for ax in fig.axes:
        leg = ax.get_legend()
        if leg is not None:
            texts += [t.get_text() for t in leg.get_texts()]
    for leg in fig.legends:
        texts += [t.get_text() for t in leg.get_texts()]
    return texts


def by_gid(fig, gid):
    return [a for ax in fig.axes for a in ax.get_children() if a.get_gid() == gid]


# Okabe & Ito (2008), "Color Universal Design": RGB 0-255 of the palette (from memory)
OKABE_ITO_RGB = {"black": (0, 0, 0), "orange": (230, 159, 0), "sky_blue": (86, 180, 233),
                 "bluish_green": (0, 158, 115), "yellow": (240, 228, 66), "blue": (0, 114, 178),
                 "vermillion": (213, 94, 0), "reddish_purple": (204, 121, 167)}


def test_palette_is_okabe_ito():
    for name, rgb in OKABE_ITO_RGB.items():
        assert np.allclose(to_rgb(plots.OKABE_ITO[name]), np.array(rgb) / 255.0, atol=0.5 / 255), name


def test_flag_classes_have_distinct_colours_and_markers():
    colours = [s[1] for s in plots.FLAG_STYLE.values()]
    markers = [s[2] for s in plots.FLAG_STYLE.values()]
    assert sorted(plots.FLAG_STYLE) == [1, 2, 3, 4, 9]
    assert len(set(colours)) == 5 and len(set(markers)) == 5
    assert set(colours) <= set(plots.OKABE_ITO.values())


def sample_variable():
    n = 60
    t = times(n)
    v = 10 + np.sin(np.arange(n) / 5.0)
    f = np.ones(n, np.int8)
    f[[5, 6, 7]] = 3
    f[20] = 4
    f[40] = 9
    v[40] = np.nan
    imm = np.ones(n, np.int8)
    imm[10:18] = 0          # two emersed runs
    imm[30:36] = 0
    imm[50] = 2
    return t, v, f, imm


def test_variable_series_and_one_marker_set_per_flag_class_present():
    t, v, f, imm = sample_variable()
    fig = plots.plot_variable(t, v, f, immersion=imm, name="temperature", units="degC", title="kc-x temperature")
    assert len(by_gid(fig, "series")) == 1
    sets = {a.get_gid() for a in fig.axes[0].collections if isinstance(a, PathCollection)}
    assert sets == {"flag-1", "flag-3", "flag-4", "flag-9"}
    (suspect,) = by_gid(fig, "flag-3")
    assert suspect.get_offsets().shape[0] == 3


def test_variable_legend_names_the_classes_present_and_the_shading():
    t, v, f, imm = sample_variable()
    texts = legend_texts(plots.plot_variable(t, v, f, immersion=imm, name="temperature", units="degC", title="x"))
    joined = " | ".join(texts)
    for words, count in (("pass", 55), ("suspect", 3), ("fail", 1), ("missing", 1)):
        assert f"{words} ({count})" in joined
    assert "not evaluated" not in joined
    assert any("emersed" in s for s in texts)


def test_variable_shades_each_emersed_run_once():
    t, v, f, imm = sample_variable()
    fig = plots.plot_variable(t, v, f, immersion=imm, name="temperature", units="degC", title="x")
    (shade,) = by_gid(fig, "emersed")
    spans = [p.vertices[:, 0] for p in shade.get_paths()]
    assert len(spans) == 2          # samples 10-17 and 30-35 (unknown at 50 is not shaded)
    days = mdates.date2num(t)
    assert [(s.min(), s.max()) for s in spans] == [(days[10], days[17]), (days[30], days[35])]


def test_variable_without_immersion_has_no_shading_entry():
    t, v, f, _ = sample_variable()
    fig = plots.plot_variable(t, v, f, name="pH", units="", title="x")
    assert not fig.axes[0].patches and not by_gid(fig, "emersed")
    assert not any("emersed" in s for s in legend_texts(fig))
    assert fig.axes[0].get_ylabel() == "pH"


def test_variable_axes_say_units_and_utc_with_date_ticks():
    t, v, f, imm = sample_variable()
    fig = plots.plot_variable(t, v, f, immersion=imm, name="temperature", units="degC", title="x")
    ax = fig.axes[0]
    assert ax.get_ylabel() == "temperature (degC)"
    assert "UTC" in ax.get_xlabel()
    assert isinstance(ax.xaxis.get_major_locator(), mdates.AutoDateLocator)
    assert isinstance(ax.xaxis.get_major_formatter(), mdates.ConciseDateFormatter)
    assert fig.get_layout_engine() is not None and "Constrained" in type(fig.get_layout_engine()).__name__


def test_variable_rejects_arrays_of_different_length():
    t, v, f, _ = sample_variable()
    with pytest.raises(ValueError, match=r"one length; found \(60,\), \(59,\) and \(60,\)"):
        plots.plot_variable(t, v[:-1], f, name="t", units="degC", title="x")


def test_water_level_lines_and_elevation():
    t = times(100)
    obs = 2 + 1.5 * np.sin(np.arange(100) / 8)
    fig = plots.plot_water_level(t, obs, obs + 0.05, elevation_m=1.6, datum_name="chart datum")
    ax = fig.axes[0]
    assert len(by_gid(fig, "observed")) == len(by_gid(fig, "predicted")) == 1
    (elev,) = by_gid(fig, "elevation")
    assert np.allclose(elev.get_ydata(), 1.6)
    assert "(m)" in ax.get_ylabel() and "chart datum" in ax.get_ylabel()
    assert "UTC" in ax.get_xlabel()
    assert any("sensing point 1.6 m" in s for s in legend_texts(fig))


def test_water_level_without_prediction():
    t = times(10)
    fig = plots.plot_water_level(t, np.arange(10.0), None, elevation_m=None, datum_name="d")
    assert by_gid(fig, "predicted") == [] and by_gid(fig, "elevation") == []


def test_transition_offsets_histogram_in_minutes_with_verdict():
    # 20 transitions about one hour late, two without a predicted match
    offsets = np.r_[np.full(10, 3600.0), np.full(10, 3720.0), np.nan, np.nan]
    fig = plots.plot_transition_offsets(offsets, verdict_text="clock about +60 min off")
    ax = fig.axes[0]
    heights = [p.get_height() for p in ax.patches]
    lefts = [p.get_x() for p in ax.patches if p.get_height() > 0]
    assert sum(heights) == 20
    assert min(lefts) <= 60 <= max(lefts) + 10 and max(lefts) < 63      # minutes, not seconds
    assert "min" in ax.get_xlabel() and "count" in ax.get_ylabel()
    texts = " ".join(t.get_text() for t in ax.texts)
    assert "clock about +60 min off" in texts and "2 transitions without a predicted match" in texts


def test_daily_exposure_bars_and_temperature():
    days = np.arange("2026-09-14", "2026-09-20", dtype="datetime64[D]")
    hours = np.array([6.5, 9.0, 0.0, 12.25, 3.0, 24.0])
    tmax = np.array([20.1, np.nan, np.nan, 25.0, 18.0, 19.0])
    fig = plots.plot_daily_exposure(days, hours, tmax)
    ax = fig.axes[0]
    bars = [p for p in ax.patches]
    assert [b.get_height() for b in bars] == list(hours)
    assert "(h)" in ax.get_ylabel() and "UTC" in ax.get_xlabel()
    assert len(fig.axes) == 2 and "(degC)" in fig.axes[1].get_ylabel()
    assert {"hours emersed", "highest aerial temperature"} <= set(legend_texts(fig))


def test_png_bytes_are_png():
    t, v, f, imm = sample_variable()
    data = plots.png_bytes(plots.plot_variable(t, v, f, immersion=imm, name="t", units="degC", title="x"))
    assert data[:8] == b"\x89PNG\r\n\x1a\n"


def test_plots_leave_no_pyplot_state():
    code = ("import sys, numpy as np\n"
            "from qcpipe.report import plots\n"
            "t = np.datetime64('2026-01-01', 'ns') + np.arange(5) * np.timedelta64(1, 'h')\n"
            "plots.png_bytes(plots.plot_variable(t, np.arange(5.0), np.ones(5), name='a', units='m', title='x'))\n"
            "plots.png_bytes(plots.plot_daily_exposure(t.astype('datetime64[D]'), np.ones(5), None))\n"
            "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported'\n"
            "import matplotlib; assert matplotlib.get_backend().lower() == 'agg', matplotlib.get_backend()\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60,
                          env={"MPLBACKEND": "", "PATH": "/usr/bin:/bin"})
    assert done.returncode == 0, done.stderr

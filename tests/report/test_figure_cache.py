"""The report's figure cache: a PNG is reused only for exactly the call that made it."""

from __future__ import annotations

import os
import time

import numpy as np

from qcpipe.report import plots
from qcpipe.report.figure_cache import FigureCache, figure_key, png_size


def _series(n=200):
    t = np.datetime64("2026-09-01T00:00:00", "ns") + np.arange(n) * np.timedelta64(60, "s")
    v = 12.0 + np.sin(np.arange(n) / 9.0)
    f = np.ones(n, np.int8)
    f[50] = 4
    return t, v, f


def test_key_changes_with_any_value_argument_or_function():
    t, v, f = _series()
    base = figure_key(plots.plot_variable, (t, v, f), {"name": "T", "units": "degC", "title": "x"})
    v2 = v.copy()
    v2[123] += 1e-9
    f2 = f.copy()
    f2[7] = 3
    assert figure_key(plots.plot_variable, (t, v.copy(), f), {"name": "T", "units": "degC", "title": "x"}) == base
    for args, kw in (((t, v2, f), {"name": "T", "units": "degC", "title": "x"}),
                     ((t, v, f2), {"name": "T", "units": "degC", "title": "x"}),
                     ((t + np.timedelta64(1, "s"), v, f), {"name": "T", "units": "degC", "title": "x"}),
                     ((t, v, f), {"name": "T", "units": "K", "title": "x"}),
                     ((t, v, f), {"name": "T", "units": "degC", "title": "x", "immersion": np.ones(200, np.int8)})):
        assert figure_key(plots.plot_variable, args, kw) != base
    assert figure_key(plots.plot_water_level, (t, v, f), {"name": "T", "units": "degC", "title": "x"}) != base


def test_second_request_is_read_back_and_equals_a_fresh_drawing(tmp_path):
    t, v, f = _series()
    kw = {"name": "temperature", "units": "degC", "title": "kc-x"}
    cache = FigureCache(tmp_path / "c")
    first = cache.png(plots.plot_variable, t, v, f, **kw)
    again = FigureCache(tmp_path / "c").png(plots.plot_variable, t, v, f, **kw)
    fresh = plots.png_bytes(plots.plot_variable(t, v, f, **kw))
    assert cache.drawn == 1 and first == again == fresh
    assert len(list((tmp_path / "c").glob("*.png"))) == 1
    fig = plots.plot_variable(t, v, f, **kw)
    assert png_size(first) == tuple(int(round(x * fig.dpi)) for x in fig.get_size_inches())


def test_damaged_entry_is_drawn_again_and_old_entries_are_pruned(tmp_path):
    t, v, f = _series()
    kw = {"name": "temperature", "units": "degC", "title": "kc-x"}
    cache = FigureCache(tmp_path)
    good = cache.png(plots.plot_variable, t, v, f, **kw)
    (entry,) = tmp_path.glob("*.png")
    entry.write_bytes(b"not a png")
    again = FigureCache(tmp_path)
    assert again.png(plots.plot_variable, t, v, f, **kw) == good and again.drawn == 1
    old = time.time() - 40 * 86400
    os.utime(entry, (old, old))
    assert FigureCache(tmp_path).prune(max_age_days=30) == 1 and not entry.exists()


def test_without_a_folder_nothing_is_kept():
    t, v, f = _series()
    cache = FigureCache(None)
    a = cache.png(plots.plot_variable, t, v, f, name="T", units="degC", title="x")
    b = cache.png(plots.plot_variable, t, v, f, name="T", units="degC", title="x")
    assert a == b and cache.drawn == 2 and cache.hits == 0

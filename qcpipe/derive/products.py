"""Derived products written beside the QC'd data, as CF NetCDF and as CSV.

* per water-level gauge deployment: high and low waters (observed and
  predicted, with the tidal-day class HHW/LHW/HLW/LLW), tidal datums of the
  record, and the harmonic constants fitted to it (a constants file the
  predictor reads);
* per station with an immersion probe: emersion periods and a daily exposure
  summary (with aerial temperature from the station's temperature logger);
* per site without harmonic constants in the register: constants fitted to all
  its gauge records (``sites/<site>/fitted_constituents.toml``, with a JSON
  record of what they were fitted to), read back while those records are
  unchanged and fitted again when new gauge data arrive.

Files: ``derived/<station>/qcpipe_<station>_<deployment>_v<NNN>_<product>.{nc,csv}``
(named after the dataset they were computed from).

Each NetCDF product carries the datasets' ACDD-1.3 block
(:func:`qcpipe.archive.cf.acdd_attributes`), is a single-feature CF ``timeSeries``
at its station (:func:`qcpipe.archive.cf.add_station_variables`), and names what it
was made from: ``source_dataset_id`` and ``source_dataset_sha256`` (the dataset
versions, in the same order) and ``qcpipe_version``. A gauge deployment's fitted
constants name the dataset, its SHA-256 and qcpipe's version in their ``source``
text; a site fit's JSON record names the gauge datasets' lineage and qcpipe's version.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import xarray as xr

from .. import __version__

from ..config.constituents import load_constituents, write_constituents
from ..config.loading import content_sha256
from ..files import sha256_of_file, write_text_atomic
from ..tide.analysis import fit_constituents
from ..tide.datums import tidal_datums
from ..tide.events import high_low_waters, tidal_day_classes
from ..tide.exposure import daily_exposure, exposure_periods
from ..archive.catalog import utc_now
from ..archive.cf import acdd_attributes, add_station_variables
from ..archive.ncio import read_dataset, write_dataset_atomic

EVENT_CLASSES = ("HHW", "LHW", "HLW", "LLW")


def _csv(rows: list[list], header: list[str]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue()


def _iso(t) -> str:
    return np.datetime_as_string(np.datetime64(t, "s"), unit="s") + "Z"


def _seconds(t) -> np.ndarray:
    return np.asarray(t, dtype="datetime64[ns]").astype(np.int64) / 1e9


def _time_attrs(long_name: str, *, coordinate: bool = False) -> dict:
    """A time variable's attributes; ``calendar`` only on the feature's time coordinate (CF-1.8 section 4.4.1)."""
    attrs = dict(long_name=long_name, standard_name="time", units="seconds since 1970-01-01T00:00:00Z")
    return attrs | dict(calendar="standard") if coordinate else attrs


#: keywords of the derived products
TIDE_KEYWORDS = "tide, high water, low water, tidal datums, water level, intertidal, coastal"
EXPOSURE_KEYWORDS = "intertidal, emersion, aerial exposure, immersion, air temperature, coastal"


def provenance_attrs(sources: list[Path]) -> dict:
    """What a product was made from: the dataset versions' ids (file stems) and SHA-256, and qcpipe's version."""
    return {"source_dataset_id": " ".join(Path(p).stem for p in sources),
            "source_dataset_sha256": " ".join(sha256_of_file(p) for p in sources),
            "qcpipe_version": __version__}


def _global(ctx, station, site, *, product: str, base_name: str, title: str, summary: str, sources: list[Path],
            keywords: str, times, end_times=None) -> dict:
    """The global attributes of a derived product: the datasets' ACDD block, a timeSeries at the station,
    and its provenance."""
    now = utc_now()
    ids = " and ".join(Path(p).stem for p in sources)
    attrs = acdd_attributes(
        info=ctx.register.info, station=station, site=site, title=title, summary=summary,
        dataset_id=f"{base_name}_{product}", history=f"{now} qcpipe {__version__}: {product} derived from {ids}",
        source=f"derived by qcpipe {__version__} from dataset {ids}",
        processing_level="Level 2: derived from quality-controlled Level 1 series", times=times, end_times=end_times,
        date_created=now, feature_type="timeSeries", keywords=keywords)
    return attrs | provenance_attrs(sources)


def _on_station(ds: xr.Dataset, enc: dict, station, site, time_name: str) -> None:
    """Make ``ds`` a single-feature timeSeries at the station: its instance variables, and every variable
    on the product's dimension naming them and ``time_name`` as its coordinates."""
    coords = f"{time_name} " + add_station_variables(ds, enc, station, site)
    for name, var in ds.data_vars.items():
        if name != time_name and var.dims and name not in ds.dims:
            var.attrs["coordinates"] = coords


def _base(ctx, station, dep, version) -> Path:
    name = f"qcpipe_{station.id}_{dep.id}_v{version:03d}"
    return ctx.paths.derived(station.id, name)


def tide_event_table(times, heights, source: str):
    """High/low waters and their tidal-day classes as rows (time, kind, class, height, source)."""
    ev = high_low_waters(times, heights)
    classes = tidal_day_classes(ev) if len(ev) else np.array([], dtype=str)
    return ev, classes, [[_iso(t), k, c, round(float(h), 4), source] for t, k, c, h in
                         zip(ev.time, ev.kind, classes, ev.height)]


def write_products(ctx, station, site, dep, kind, time, conv, flags, version, *, tide=None) -> list[Path]:
    """Products of a water-level gauge deployment: events, datums, fitted constants."""
    if kind != "pressure" or "water_level" not in conv.variables:
        return []
    wl = np.asarray(conv.variables["water_level"], dtype=np.float64)
    good = ~np.isin(flags["water_level"]["aggregate"], (4, 9)) & np.isfinite(wl)
    t, h = np.asarray(time)[good], wl[good]
    if t.size < 100:
        return []
    base = _base(ctx, station, dep, version)
    written: list[Path] = []
    ev, cls, rows = tide_event_table(t, h, "observed")
    n_obs = len(rows)
    if tide is not None and tide.constants is not None:
        grid = np.arange(t[0], t[-1], np.timedelta64(6, "m"))
        _, _, prow = tide_event_table(grid, tide.predicted(grid), "predicted")
        rows += prow
    rows.sort(key=lambda r: (r[0], r[4]))
    written.append(write_text_atomic(base.with_name(base.name + "_tide_events.csv"),
                                     _csv(rows, ["time_utc", "kind", "tidal_day_class", "height_m", "source"])))
    n = len(rows)
    event_times = np.array([np.datetime64(r[0].rstrip("Z"), "ns") for r in rows], dtype="datetime64[ns]")
    ds = xr.Dataset({
        "event_time": ("event", _seconds(event_times).astype(np.float64),
                       _time_attrs("time of the high or low water (UTC)", coordinate=True)),
        "event_height": ("event", np.array([r[3] for r in rows], np.float64),
                         dict(standard_name="water_surface_height_above_reference_datum",
                              long_name=f"height of the high or low water above {site.vertical_datum}", units="m")),
        "event_kind": ("event", np.array([1 if r[1] == "high" else 0 for r in rows], np.int8),
                       dict(long_name="kind of event", flag_values=np.array([0, 1], np.int8),
                            flag_meanings="low_water high_water")),
        "event_class": ("event", np.array([EVENT_CLASSES.index(r[2]) + 1 if r[2] in EVENT_CLASSES else 0
                                           for r in rows], np.int8),
                        dict(long_name="class of the event within its tidal day (24.8412 h)",
                             flag_values=np.array([0, 1, 2, 3, 4], np.int8),
                             flag_meanings="unclassified higher_high_water lower_high_water higher_low_water "
                                           "lower_low_water")),
        "event_source": ("event", np.array([1 if r[4] == "observed" else 0 for r in rows], np.int8),
                         dict(long_name="source of the event", flag_values=np.array([0, 1], np.int8),
                              flag_meanings="harmonic_prediction observed_water_level")),
    })
    source = ctx.paths.dataset(station.id, dep.id, version)
    attrs = _global(ctx, station, site, product="tide_events", base_name=base.name, keywords=TIDE_KEYWORDS,
                    title=f"High and low waters at station {station.id}, deployment {dep.id}",
                    summary=(f"{n_obs} high and low waters observed in the quality-controlled water level of "
                             f"deployment {dep.id} (samples flagged fail or missing left out) and {n - n_obs} "
                             "predicted from the site's harmonic constants over the same span, each with its class "
                             "in the tidal day (HHW, LHW, HLW, LLW), heights above "
                             f"{site.vertical_datum}; tidal datums of the record in the datum_* attributes."),
                    sources=[source], times=event_times)
    try:
        dat = tidal_datums(t, h, ev)
    except ValueError as err:
        dat = None
        attrs["tidal_datums"] = f"not computed: {err}"
    if dat is not None:
        keys = ("mhhw", "mhw", "dtl", "mtl", "msl", "mlw", "mllw", "mn", "gt")
        for k in keys:
            attrs[f"datum_{k}_m"] = round(float(getattr(dat, k)), 4)
        attrs["datum_record_length_days"] = round(dat.record_length_days, 2)
        attrs["datum_note"] = dat.note
        written.append(write_text_atomic(
            base.with_name(base.name + "_datums.csv"),
            _csv([[k.upper(), round(float(getattr(dat, k)), 4)] for k in keys] +
                 [["record_length_days", round(dat.record_length_days, 2)], ["note", dat.note]],
                 ["datum", f"metres above {site.vertical_datum}"])))
    ds.attrs = attrs
    enc = {v: {"_FillValue": None} for v in ds.data_vars}
    _on_station(ds, enc, station, site, "event_time")
    written.append(write_dataset_atomic(ds, base.with_name(base.name + "_tide_events.nc"), enc))
    record_days = (t[-1] - t[0]).astype("timedelta64[s]").astype(float) / 86400
    if record_days >= 15:
        fit = fit_constituents(t, h, latitude=station.latitude)
        constants = fit.to_constants(site=site.name, datum=site.vertical_datum,
                                     source=f"least-squares fit by qcpipe {__version__} to {base.name} "
                                            f"(sha256:{sha256_of_file(source)}, {record_days:.1f} days)")
        written.append(write_constituents(base.with_name(base.name + "_constituents.toml"), constants))
    return written


def site_fitted_constants(ctx, site, times, levels, gauges: dict, *, latitude: float | None,
                          sources: dict | None = None):
    """Constants fitted to all of a site's gauge records: (constants or None, what they come from, why not).

    ``times``/``levels`` are the gauges' latest valid samples merged; ``gauges`` is
    what made each gauge's latest dataset (:func:`qcpipe.lineage.site_gauge_datasets`),
    whose hash keys the fit: while it is unchanged the written constants are read
    back, otherwise they are fitted again (:func:`qcpipe.tide.analysis.fit_constituents`,
    at least 15 days of record) and written with a JSON record of the fit: the
    gauges, ``sources`` (each gauge dataset's file and SHA-256), the span, the record length and the constituents resolved, inferred and dropped.
    """
    toml = ctx.paths.site_product(site.id, "fitted_constituents.toml")
    record = toml.with_suffix(".json")
    key = content_sha256(gauges)
    if toml.exists() and record.exists():
        meta = json.loads(record.read_text("utf-8"))
        if meta.get("inputs_sha256") == key:
            return load_constituents(toml), meta["described"], ""
    t = np.asarray(times, dtype="datetime64[ns]")
    if t.size < 2:
        return None, "", "the site has no gauge record to fit harmonic constants to"
    days = float((t.max() - t.min()).astype("timedelta64[s]").astype(np.int64)) / 86400.0
    try:
        fit = fit_constituents(t, levels, latitude=latitude)
    except ValueError as err:
        return None, "", f"its gauge record ({days:.1f} days) is too short to fit harmonic constants to: {err}"
    described = (f"fitted by qcpipe {__version__} to {fit.n_samples} samples of gauge deployment(s) "
                 f"{', '.join(sorted(gauges))}, {_iso(fit.start)} to {_iso(fit.end)} ({fit.record_days:.1f} days)")
    constants = fit.to_constants(site=site.name, datum=site.vertical_datum, source=described)
    write_constituents(toml, constants)
    meta = {"inputs_sha256": key, "described": described, "gauge_datasets": gauges, "qcpipe_version": __version__,
            "source_datasets": sources or {},
            "start": _iso(fit.start), "end": _iso(fit.end), "record_days": round(fit.record_days, 3),
            "samples": fit.n_samples, "residual_std_m": round(float(fit.residual_std_m), 4),
            "resolved": list(fit.resolved), "dropped": dict(fit.dropped),
            "inferred": {name: {"from": i.reference, "amplitude_ratio": round(float(i.amplitude_ratio), 6),
                                "phase_difference_deg": float(i.phase_difference_deg)}
                         for name, i in fit.inferred.items()}}
    write_text_atomic(record, json.dumps(meta, indent=1, sort_keys=True) + "\n")
    return constants, described, ""


def write_exposure_products(ctx, station) -> list[Path]:
    """Emersion periods and daily exposure of a station from its probe's and temperature logger's latest datasets."""

    site = ctx.register.site_by_id(station.site)
    probe = temp = None
    for dep in ctx.register.deployment:
        if dep.station != station.id:
            continue
        latest = ctx.catalog.latest_dataset(dep.id)
        if latest is None or not Path(latest["path"]).exists():
            continue
        kind = ctx.register.kind_of(dep.id)
        if kind == "immersion_probe" and probe is None:
            probe = (dep, latest)
        elif kind == "temperature" and temp is None:
            temp = (dep, latest)
    if probe is None:
        return []
    dep, latest = probe
    pds = read_dataset(latest["path"])
    tt = tv = None
    if temp is not None:
        tds = read_dataset(temp[1]["path"])
        ok = ~np.isin(tds["temperature_qc"].values, (4, 9))
        tt, tv = tds["time"].values[ok], tds["temperature"].values[ok]
    periods = exposure_periods(pds["time"].values, pds["immersion"].values, tt, tv)
    daily = daily_exposure(periods, temperature_times=tt, temperature=tv)
    base = _base(ctx, station, dep, latest["version"])
    sources = [Path(latest["path"])] + ([Path(temp[1]["path"])] if temp else [])
    written = [
        write_text_atomic(base.with_name(base.name + "_emersion_periods.csv"), _csv(
            [[_iso(s), _iso(e), round(float(d) / 3600, 4), _r(mx), _r(mn), int(c)] for s, e, d, mx, mn, c in
             zip(periods.start, periods.end, periods.duration_s, periods.max_temperature,
                 periods.mean_temperature, periods.complete)],
            ["start_utc", "end_utc", "duration_h", "max_temperature_degC", "mean_temperature_degC",
             "both_ends_observed"])),
        write_text_atomic(base.with_name(base.name + "_daily_exposure.csv"), _csv(
            [[str(d), round(float(h), 4), int(n), round(float(lg), 4), _r(mx)] for d, h, n, lg, mx in
             zip(daily.day, daily.emersed_h, daily.n_emersions, daily.longest_emersion_h, daily.max_temperature)],
            ["day_utc", "hours_emersed", "emersions", "longest_emersion_h", "max_aerial_temperature_degC"])),
    ]
    fill = {"_FillValue": np.float64(np.nan)}
    pds_out = xr.Dataset({
        "start_time": ("period", _seconds(periods.start), _time_attrs("first emersed sample (UTC)", coordinate=True)),
        "end_time": ("period", _seconds(periods.end), _time_attrs("first immersed sample after the emersion (UTC)")),
        "duration": ("period", periods.duration_s.astype(np.float64), dict(long_name="emersion duration", units="s")),
        "max_temperature": ("period", periods.max_temperature, dict(long_name="highest temperature while emersed",
                                                                    units="degC")),
        "mean_temperature": ("period", periods.mean_temperature, dict(long_name="mean temperature while emersed",
                                                                      units="degC")),
        "both_ends_observed": ("period", periods.complete.astype(np.int8), dict(
            long_name="the draining and the flooding that bound the period were both observed",
            flag_values=np.array([0, 1], np.int8), flag_meanings="no yes")),
    }, attrs=_global(ctx, station, site, product="emersion_periods", base_name=base.name, keywords=EXPOSURE_KEYWORDS,
                     title=f"Emersion periods at station {station.id} ({station.name})",
                     summary=(f"{len(periods)} periods when the sensing point of station {station.id}, "
                              f"{station.elevation_m:g} m above {site.vertical_datum}, was out of the water, from the "
                              f"immersion state of probe deployment {dep.id}: start, end, duration and the highest and "
                              "mean temperature while emersed (from the station's temperature logger where it has one)."),
                     sources=sources, times=periods.start, end_times=periods.end))
    enc = {"start_time": {"_FillValue": None}, "end_time": {"_FillValue": None}, "duration": fill,
           "max_temperature": fill, "mean_temperature": fill, "both_ends_observed": {"_FillValue": None}}
    _on_station(pds_out, enc, station, site, "start_time")
    written.append(write_dataset_atomic(pds_out, base.with_name(base.name + "_emersion_periods.nc"), enc))
    day_s = _seconds(daily.day.astype("datetime64[ns]"))
    dds = xr.Dataset({
        "day": ("day", day_s, _time_attrs("start of the UTC day", coordinate=True) | {"axis": "T"}),
        "hours_emersed": ("day", daily.emersed_h, dict(long_name="time emersed within the day", units="h")),
        "emersions": ("day", daily.n_emersions.astype(np.int32), dict(long_name="emersions with a part in the day",
                                                                       units="1")),
        "longest_emersion": ("day", daily.longest_emersion_h, dict(long_name="longest emersion within the day",
                                                                   units="h")),
        "max_aerial_temperature": ("day", daily.max_temperature, dict(
            long_name="highest temperature while emersed within the day", units="degC")),
    }, attrs=_global(ctx, station, site, product="daily_exposure", base_name=base.name, keywords=EXPOSURE_KEYWORDS,
                     title=f"Daily exposure at station {station.id} ({station.name})",
                     summary=(f"Per UTC day at station {station.id}: hours emersed, number of emersions, longest "
                              "emersion and highest aerial temperature, from the emersion periods of probe "
                              f"deployment {dep.id}."),
                     sources=sources, times=daily.day.astype("datetime64[ns]"),
                     end_times=daily.day.astype("datetime64[ns]") + np.timedelta64(1, "D")))
    enc = {"day": {"_FillValue": None}, "hours_emersed": fill, "emersions": {"_FillValue": None},
           "longest_emersion": fill, "max_aerial_temperature": fill}
    _on_station(dds, enc, station, site, "day")
    written.append(write_dataset_atomic(dds, base.with_name(base.name + "_daily_exposure.nc"), enc))
    return written


def _r(x, nd=3):
    return "" if not np.isfinite(x) else round(float(x), nd)

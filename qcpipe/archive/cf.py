"""CF-1.8 / ACDD-1.3 encoding of a QC'd station time series.

One file per station and deployment: discrete sampling geometry
``featureType = timeSeries`` with a single feature (CF-1.8 section 9.2:
the instance dimension is omitted and instance variables are scalar), time
in UTC as "seconds since 1970-01-01T00:00:00Z", a character station id with
``cf_role = timeseries_id``, latitude, longitude and the height of the
sensing point above the site's vertical datum.

The ACDD-1.3 block common to every NetCDF output (the datasets here, the derived
products of :mod:`qcpipe.derive.products`) is :func:`acdd_attributes`, and the
station's instance variables of a single-feature ``timeSeries`` are
:func:`add_station_variables`.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import xarray as xr

from ..checks import FLAG_MEANINGS, FLAG_VALUES

#: metadata of each physical variable qcpipe writes (standard names from CF table v83)
VARIABLE_META = {
    "temperature": dict(long_name="temperature at the sensing point (water when immersed, air when emersed)",
                        units="degC", valid_min=-40.0, valid_max=80.0),
    "ph": dict(long_name="pH as reported by the sonde (scale of its calibration buffers)",
               units="1", valid_min=0.0, valid_max=14.0),
    "conductivity": dict(standard_name="sea_water_electrical_conductivity", long_name="electrical conductivity",
                         units="S m-1", valid_min=0.0, valid_max=10.0),
    "pressure": dict(standard_name="sea_water_pressure", long_name="absolute pressure at the sensor",
                     units="Pa", valid_min=0.0, valid_max=2.0e6),
    "water_level": dict(standard_name="water_surface_height_above_reference_datum",
                        long_name="water level above the site's vertical datum", units="m",
                        valid_min=-50.0, valid_max=50.0),
    "probe_reading": dict(long_name="raw reading of the capacitive immersion probe"),
    "wetness": dict(long_name="wetness index of the immersion probe (0 dry, 1 wet)", units="1",
                    valid_min=0.0, valid_max=1.0),
    "air_pressure": dict(standard_name="air_pressure", long_name="air pressure at the barometer", units="Pa",
                         valid_min=50000.0, valid_max=110000.0),
}

#: CF standard name and long-name words of each check's flag variable
CHECK_META = {
    "gross_range": ("gross_range_test_quality_flag", "gross range test"),
    "climatology": ("climatology_test_quality_flag", "climatology test"),
    "spike": ("spike_test_quality_flag", "spike test"),
    "rate_of_change": ("rate_of_change_test_quality_flag", "rate of change test"),
    "flat_line": ("flat_line_test_quality_flag", "flat line (stuck value) test"),
    "gap": ("gap_test_quality_flag", "gap test"),
    "download_conflict": ("quality_flag", "test for values that differ between overlapping downloads"),
    "immersion_consistency": ("quality_flag", "tide consistency test (probe state against the water level)"),
    "immersion_quality": ("quality_flag", "immersion probe health test (bimodality, clock, elevation)"),
    "immersion_gating": ("quality_flag", "immersion gating test (sensor in air or settling after immersion)"),
    "tide_residual": ("quality_flag", "tide residual test (observed minus predicted water level)"),
    "barometer_fallback": ("quality_flag", "barometer fallback test (configured constant air pressure "
                                           "subtracted where the site's barometer had no valid value)"),
    "manual": ("quality_flag", "manual review"),
    "aggregate": ("aggregate_quality_flag", "aggregate of all tests (manual review takes precedence)"),
}

IMMERSION_META = dict(long_name="immersion state of the sensing point",
                      flag_values=np.array([0, 1, 2], dtype=np.int8),
                      flag_meanings="emersed immersed unknown")


def flag_name(variable: str, check: str) -> str:
    """Name of the flag variable of ``check`` on ``variable`` (``<var>_qc`` for the aggregate)."""
    return f"{variable}_qc" if check == "aggregate" else f"{variable}_qc_{check}"


def _iso(t: np.datetime64) -> str:
    return np.datetime_as_string(np.datetime64(t, "s"), unit="s") + "Z"


def _duration_iso(seconds: float) -> str:
    seconds = int(round(seconds))
    d, rem = divmod(seconds, 86400)
    h, rem = divmod(rem, 3600)
    m, s = divmod(rem, 60)
    return f"P{d}DT{h}H{m}M{s}S"


#: the outputs' comment on their heights and their use (read with the site's datum name)
SAFETY_NOTE = "Tide values are for data quality control only, not for navigation or safety planning."


def time_coverage(times, end_times=None) -> dict:
    """ACDD ``time_coverage_*`` of sample times (datetime64) as ISO 8601: first, last, span and median step.

    ``end_times`` (optional) are the ends of the intervals that start at ``times``
    (emersion periods, days): the coverage then runs to the latest end.
    ``time_coverage_resolution`` is the median step between successive distinct
    ``times`` (the step of a regular series; the typical spacing of irregular events).
    """
    t = np.unique(np.asarray(times, dtype="datetime64[ns]"))
    if t.size == 0:
        return {"time_coverage_start": "", "time_coverage_end": "", "time_coverage_duration": "P0D",
                "time_coverage_resolution": "P0D"}
    ends = np.asarray([] if end_times is None else end_times, dtype="datetime64[ns]")
    ends = ends[~np.isnat(ends)]
    last = max(t[-1], ends.max()) if ends.size else t[-1]
    step = float(np.median(np.diff(t).astype(np.int64)) / 1e9) if t.size > 1 else 0.0
    return {"time_coverage_start": _iso(t[0]), "time_coverage_end": _iso(last),
            "time_coverage_duration": _duration_iso((last - t[0]).astype(np.int64) / 1e9),
            "time_coverage_resolution": _duration_iso(step)}


def acdd_attributes(*, info, station, site, title: str, summary: str, dataset_id: str, history: str, source: str,
                    processing_level: str, times, date_created: str, feature_type: str | None,
                    end_times=None, keywords: str = "intertidal, coastal, immersion, water level, sea water temperature, "
                                    "quality control") -> dict:
    """The ACDD-1.3 global attributes every qcpipe NetCDF output carries (datasets and derived products).

    ``info`` is the register's ``[register]`` table (creator, publisher, institution,
    license, acknowledgement, comment); ``station`` and ``site`` give the place:
    ``geospatial_bounds`` is a WKT ``POINT (latitude longitude)`` in EPSG:4326 (ACDD-1.3's
    default CRS and axis order), the vertical extent is the sensing point's height
    above the site's datum. That datum is a local chart datum with no EPSG code, so
    ``geospatial_bounds_vertical_crs`` is not written: ``vertical_datum`` and the
    ``comment`` name it instead. ``times`` (datetime64; with ``end_times`` for intervals) give
    ``time_coverage_*`` (:func:`time_coverage`);
    ``feature_type`` is the CF discrete sampling geometry, None where CF has none.
    """
    publisher_name, publisher_email, publisher_url = info.publisher
    datum = site.vertical_datum
    comment = (f"Heights (geospatial_vertical_min/max and every height or water level variable) are metres "
               f"above {datum}, a local chart datum of the site that has no EPSG code "
               f"(so no geospatial_bounds_vertical_crs is given). {SAFETY_NOTE}")
    attrs = {
        "Conventions": "CF-1.8, ACDD-1.3",
        "title": title,
        "summary": summary,
        "keywords": keywords,
        "id": dataset_id,
        "naming_authority": info.naming_authority,
        "history": history,
        "source": source,
        "processing_level": processing_level,
        "comment": f"{info.comment.strip()} {comment}".strip(),
        "acknowledgement": info.acknowledgement or f"Data collected and processed by {publisher_name}.",
        "license": info.license,
        "standard_name_vocabulary": "CF Standard Name Table v83",
        "date_created": date_created,
        "creator_name": info.creator_name,
        "creator_email": info.creator_email,
        "creator_url": info.creator_url,
        "institution": info.institution,
        "publisher_name": publisher_name,
        "publisher_email": publisher_email,
        "publisher_url": publisher_url,
        "project": info.name,
        "geospatial_bounds": f"POINT ({station.latitude:.6f} {station.longitude:.6f})",
        "geospatial_bounds_crs": "EPSG:4326",
        "geospatial_lat_min": station.latitude, "geospatial_lat_max": station.latitude,
        "geospatial_lat_units": "degrees_north",
        "geospatial_lon_min": station.longitude, "geospatial_lon_max": station.longitude,
        "geospatial_lon_units": "degrees_east",
        "geospatial_vertical_min": station.elevation_m, "geospatial_vertical_max": station.elevation_m,
        "geospatial_vertical_units": "m", "geospatial_vertical_positive": "up",
        "vertical_datum": datum,
        **time_coverage(times, end_times),
        "station_id": station.id, "station_name": station.name, "site_id": site.id, "site_name": site.name,
    }
    if feature_type is not None:
        attrs["featureType"] = feature_type
        attrs["cdm_data_type"] = "Station"
    return attrs


def add_station_variables(ds: xr.Dataset, encoding: dict, station, site) -> str:
    """The station's instance variables of a single-feature ``timeSeries`` (CF-1.8 section 9.2: the
    instance dimension omitted, the variables scalar): ``station_id`` (``cf_role = timeseries_id``),
    latitude, longitude and ``sensor_height`` above the site's datum. Returns them as the auxiliary
    coordinates a data variable names (without its time)."""
    ds["station_id"] = xr.DataArray(np.array(station.id.encode("ascii"), dtype=f"S{len(station.id)}"),
                                    attrs=dict(cf_role="timeseries_id", long_name="station identifier"))
    ds["latitude"] = xr.DataArray(np.float64(station.latitude), attrs=dict(
        standard_name="latitude", long_name="station latitude (WGS84)", units="degrees_north", axis="Y"))
    ds["longitude"] = xr.DataArray(np.float64(station.longitude), attrs=dict(
        standard_name="longitude", long_name="station longitude (WGS84)", units="degrees_east", axis="X"))
    ds["sensor_height"] = xr.DataArray(np.float64(station.elevation_m), attrs=dict(
        long_name=f"height of the sensing point above {site.vertical_datum}", units="m", positive="up",
        axis="Z", vertical_datum=site.vertical_datum))
    encoding.update({"latitude": dict(_FillValue=None), "longitude": dict(_FillValue=None),
                     "sensor_height": dict(_FillValue=None),
                     "station_id": dict(dtype="S1", char_dim_name="name_strlen", _FillValue=None)})
    return "latitude longitude sensor_height station_id"


def build_cf_dataset(*, time, variables: dict, flags: dict, immersion=None, station, site, deployment,
                     register_info, provenance: dict, version: int, history: str,
                     raw_units: dict | None = None) -> tuple[xr.Dataset, dict]:
    """Assemble the CF/ACDD dataset and its NetCDF encoding.

    Parameters
    ----------
    time : datetime64[ns] array (UTC)
    variables : {name: float array} physical variables (keys of ``VARIABLE_META``)
    flags : {variable: {check: int8 array}} including "aggregate"
    immersion : int8 array or None, immersion state (0 emersed, 1 immersed, 2 unknown)
    station, site, deployment : register entries
    register_info : the register's [register] table (creator, institution, license ...)
    provenance : {"rules_name", "rules_sha256", "register_sha256", "raw_files": [(name, sha256)],
                  "software_version", "notes": {var: text}}
    version : dataset version number
    history : one line for the ACDD/CF ``history`` attribute

    Returns
    -------
    (xarray.Dataset, encoding dict for ``to_netcdf``)
    """
    time = np.asarray(time, dtype="datetime64[ns]")
    n = time.size
    # time written as numbers with the units spelled exactly as CF/ACDD readers expect
    seconds = (time.astype(np.int64) / 1e9).astype(np.float64)
    ds = xr.Dataset(coords={"time": ("time", seconds, dict(
        standard_name="time", long_name="time of the sample (UTC)", axis="T",
        units="seconds since 1970-01-01T00:00:00Z", calendar="standard"))})
    encoding: dict = {"time": dict(dtype="float64", _FillValue=None)}
    coord_names = "time " + add_station_variables(ds, encoding, station, site)
    chunk = int(min(max(n, 1), 65536))
    notes = provenance.get("notes", {})

    for name, values in variables.items():
        meta = dict(VARIABLE_META[name], **provenance.get("meta", {}).get(name, {}))
        if name == "probe_reading":
            meta["units"] = {"count": "1"}.get((raw_units or {}).get(name, "1"), (raw_units or {}).get(name, "1"))
        fl = flags.get(name, {})
        anc = [flag_name(name, c) for c in fl]
        attrs = dict(meta)
        attrs["coordinates"] = coord_names
        if anc:
            attrs["ancillary_variables"] = " ".join(anc)
        if name in notes:
            attrs["comment"] = notes[name]
        ds[name] = xr.DataArray(np.asarray(values, dtype=np.float64), dims=("time",), attrs=attrs)
        encoding[name] = dict(dtype="float64", _FillValue=np.float64(np.nan), zlib=True, complevel=4,
                              shuffle=True, chunksizes=(chunk,))
        for check, arr in fl.items():
            std, words = CHECK_META[check]
            fname = flag_name(name, check)
            ds[fname] = xr.DataArray(np.asarray(arr, dtype=np.int8), dims=("time",), attrs=dict(
                standard_name=std, long_name=f"{words} quality flag for {name}",
                flag_values=FLAG_VALUES, flag_meanings=FLAG_MEANINGS,
                valid_range=np.array([1, 9], dtype=np.int8),
                coordinates=coord_names,
                references="IOC Manuals and Guides 54, Vol. 3 (2013): primary quality flags"))
            encoding[fname] = dict(dtype="int8", _FillValue=None, zlib=True, complevel=4, chunksizes=(chunk,))
    if immersion is not None:
        ds["immersion"] = xr.DataArray(np.asarray(immersion, dtype=np.int8), dims=("time",),
                                       attrs=dict(IMMERSION_META, coordinates=coord_names))
        encoding["immersion"] = dict(dtype="int8", _FillValue=None, zlib=True, complevel=4, chunksizes=(chunk,))

    now = dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    info = register_info
    raw = provenance.get("raw_files", [])
    names = ", ".join(v for v in variables if v in VARIABLE_META)
    ds.attrs = acdd_attributes(
        info=info, station=station, site=site, times=time, date_created=now, feature_type="timeSeries",
        title=f"Quality-controlled logger series, station {station.id} ({station.name}), deployment {deployment.id}",
        summary=(f"Time series of {names} from instrument {deployment.instrument} at station {station.id} "
                 f"({station.name}) of site {site.name}, sensing point {station.elevation_m:g} m above "
                 f"{site.vertical_datum}. Converted from raw logger downloads to UTC with clock-drift "
                 "correction, trimmed to the deployment, and flagged by automated QC checks with the IOC "
                 "primary flag scheme (1 pass, 2 not evaluated, 3 suspect, 4 fail, 9 missing)."),
        dataset_id=f"qcpipe_{station.id}_{deployment.id}_v{version:03d}", history=history,
        source=f"{deployment.instrument} logger ({', '.join(sorted(set(r[0] for r in raw)))})" if raw else "logger",
        processing_level="Level 1: converted to physical units, UTC, automated QC flags attached")
    ds.attrs.update({
        "date_modified": now,
        "platform": f"fixed station {station.id}",
        "instrument": deployment.instrument,
        "product_version": f"v{version:03d}",
        "deployment_id": deployment.id,
        "deployment_start": deployment.start.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "deployment_end": deployment.end.astimezone(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "qcpipe_version": provenance["software_version"],
        "qc_rule_set": provenance["rules_name"],
        "qc_rule_set_sha256": provenance["rules_sha256"],
        "station_register_sha256": provenance["register_sha256"],
        "raw_file_names": " ".join(r[0] for r in raw),
        "raw_file_sha256": " ".join(r[1] for r in raw),
        "flag_scheme": "IOC Manuals and Guides 54, Vol. 3 (2013) primary flags; "
                       "aggregate = worst of fail > suspect > pass over the checks that ran",
    })
    for key, value in provenance.get("extra_attrs", {}).items():
        ds.attrs[key] = value
    if "previous_version" in provenance:
        ds.attrs["previous_version_id"] = provenance["previous_version"]
    return ds, encoding


def add_source_variable(ds: xr.Dataset, encoding: dict, name: str, codes, *, long_name: str, meanings: str,
                        of: str) -> None:
    """A per-sample int8 variable saying where another variable (``of``) came from, listed in its
    ``ancillary_variables``; ``meanings`` are the flag meanings of codes 0, 1, 2, ..."""
    n = len(meanings.split())
    ds[name] = xr.DataArray(np.asarray(codes, np.int8), dims=("time",), attrs=dict(
        long_name=long_name, coordinates=ds[of].attrs.get("coordinates", "time"),
        flag_values=np.arange(n, dtype=np.int8), flag_meanings=meanings))
    encoding[name] = dict(dtype="int8", _FillValue=None, zlib=True, complevel=4,
                          chunksizes=encoding[of]["chunksizes"])
    anc = ds[of].attrs.get("ancillary_variables", "")
    ds[of].attrs["ancillary_variables"] = f"{anc} {name}".strip()


def add_air_pressure(ds: xr.Dataset, encoding: dict, air_pressure_pa, source=None) -> None:
    """The air pressure a level logger's water level subtracted at each sample, and where it came from.

    ``air_pressure_pa`` (Pa, one per sample); ``source`` int8 per sample, 1 the
    site's barometer (interpolated), 2 the configured constant, or None where
    only the constant was configured (no barometer at the site).
    """
    coords = ds["water_level"].attrs.get("coordinates", "time")
    chunk = encoding["water_level"]["chunksizes"]
    ds["air_pressure_subtracted"] = xr.DataArray(np.asarray(air_pressure_pa, np.float64), dims=("time",), attrs=dict(
        standard_name="air_pressure", units="Pa", coordinates=coords,
        long_name="air pressure subtracted from the sensor's absolute pressure to give the water level"))
    encoding["air_pressure_subtracted"] = dict(dtype="float64", _FillValue=np.float64(np.nan), zlib=True,
                                               complevel=4, shuffle=True, chunksizes=chunk)
    if source is None:
        return
    ds["air_pressure_source"] = xr.DataArray(np.asarray(source, np.int8), dims=("time",), attrs=dict(
        long_name="source of the air pressure subtracted at each sample", coordinates=coords,
        flag_values=np.array([1, 2], np.int8), flag_meanings="site_barometer configured_constant"))
    encoding["air_pressure_source"] = dict(dtype="int8", _FillValue=None, zlib=True, complevel=4, chunksizes=chunk)
    ds["air_pressure_subtracted"].attrs["ancillary_variables"] = "air_pressure_source"

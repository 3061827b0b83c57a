"""CF and ACDD metadata of every NetCDF output: the QC'd datasets and the derived products.

One archive is built from a copy of the demo with the run sequence in this process
(``nightly_run(ctx, InProcess())``, no orchestrator). Every output is checked with the
CF checker (PyPI cfchecker, CF-1.8, the CF tables in tests/reference/cf) and against
the ACDD-1.3 attribute list written below; provenance is checked with hashlib against
the files it names, and the publisher against the demo register read with tomllib.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import re
import shutil
import tomllib
from pathlib import Path

import netCDF4
import numpy as np
import pytest

import qcpipe
from qcpipe import pipeline
from qcpipe.pipeline.run import InProcess, nightly_run
from tests.conftest import REPO, cf_check

# ACDD 1.3 (ESIP, "Attribute Convention for Data Discovery 1-3"), from memory: the highly
# recommended and the recommended global attributes.
ACDD_HIGHLY_RECOMMENDED = ["title", "summary", "keywords", "Conventions"]
ACDD_RECOMMENDED = [
    "id", "naming_authority", "history", "source", "processing_level", "comment", "acknowledgement", "license",
    "standard_name_vocabulary", "date_created", "creator_name", "creator_email", "creator_url", "institution",
    "project", "publisher_name", "publisher_email", "publisher_url", "geospatial_bounds", "geospatial_bounds_crs",
    "geospatial_bounds_vertical_crs", "geospatial_lat_min", "geospatial_lat_max", "geospatial_lon_min",
    "geospatial_lon_max", "geospatial_vertical_min", "geospatial_vertical_max", "geospatial_vertical_positive",
    "time_coverage_start", "time_coverage_end", "time_coverage_duration", "time_coverage_resolution",
]
# ACDD 1.3: geospatial_bounds_vertical_crs is the CRS of the Z values of geospatial_bounds. Ours is a 2D
# POINT, and the sites' heights refer to local chart datums that have no EPSG code: the comment names the
# datum instead (checked in test_vertical_datum_is_named_and_said_to_be_local).
NOT_APPLICABLE = {"geospatial_bounds_vertical_crs"}

EPOCH = dt.datetime(1970, 1, 1, tzinfo=dt.timezone.utc)
#: the time variables whose extent each kind of output covers, and what a value's interval adds after it
COVERAGE = {"dataset": (["time"], 0), "tide_events": (["event_time"], 0),
            "emersion_periods": (["start_time", "end_time"], 0), "daily_exposure": (["day"], 86400)}


@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("cf-outputs")
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    ctx = pipeline.load_context(root / "sample_raw" / "workspace.toml")
    nightly_run(ctx, InProcess())
    return ctx.paths.root


def outputs(archive: Path) -> dict[str, Path]:
    """Every NetCDF output by file stem (not the pre-QC stores under ingested/, which are working files)."""
    files = sorted((archive / "datasets").rglob("*.nc")) + sorted((archive / "derived").rglob("*.nc"))
    return {p.stem: p for p in files}


def kind_of(path: Path) -> str:
    return next((k for k in COVERAGE if k != "dataset" and path.stem.endswith("_" + k)), "dataset")


def attrs_of(path: Path) -> dict:
    with netCDF4.Dataset(path) as nc:
        return {k: nc.getncattr(k) for k in nc.ncattrs()}


def iso(seconds: float) -> str:
    return (EPOCH + dt.timedelta(seconds=float(seconds))).strftime("%Y-%m-%dT%H:%M:%SZ")


def iso_duration_s(text: str) -> float:
    """Seconds of an ISO 8601 duration of the form PnDTnHnMnS (parsed here, not by qcpipe)."""
    m = re.fullmatch(r"P(\d+)DT(\d+)H(\d+)M(\d+)S", text)
    assert m, text
    d, h, mi, s = map(int, m.groups())
    return ((d * 24 + h) * 60 + mi) * 60 + s


def test_every_output_is_present(archive):
    # the demo: 9 deployments; a tide-events product of the gauge; emersion periods and daily exposure of
    # each of the three shore stations with a probe (sample_raw/register.toml)
    kinds = [kind_of(p) for p in outputs(archive).values()]
    assert kinds.count("dataset") == 9 and kinds.count("tide_events") == 1
    assert kinds.count("emersion_periods") == 3 and kinds.count("daily_exposure") == 3


def test_cf_checker_finds_nothing_in_any_output(archive, cf_tables):
    # no errors, no warnings and no INFO messages, derived products and probe transitions included
    for path in outputs(archive).values():
        cf_check(path, cf_tables, allow_info=False)


def test_acdd_highly_recommended_and_recommended_attributes_on_every_output(archive):
    for stem, path in outputs(archive).items():
        attrs = attrs_of(path)
        for key in ACDD_HIGHLY_RECOMMENDED + ACDD_RECOMMENDED:
            if key in NOT_APPLICABLE:
                continue
            assert str(attrs.get(key, "")).strip(), f"{path.name}: ACDD-1.3 {key} missing or empty"
        assert {"CF-1.8", "ACDD-1.3"} <= {c.strip() for c in attrs["Conventions"].split(",")}
        assert attrs["id"] == stem
        dt.datetime.strptime(attrs["date_created"], "%Y-%m-%dT%H:%M:%SZ")
    ids = [attrs_of(p)["id"] for p in outputs(archive).values()]
    assert len(set(ids)) == len(ids)


def test_publisher_comes_from_the_register(archive):
    info = tomllib.loads((archive.parent / "sample_raw" / "register.toml").read_text("utf-8"))["register"]
    for path in outputs(archive).values():
        attrs = attrs_of(path)
        for key in ("publisher_name", "publisher_email", "publisher_url", "acknowledgement", "creator_name",
                    "creator_email", "creator_url", "institution", "license", "naming_authority"):
            assert attrs[key] == info[key], (path.name, key)


def test_geospatial_attributes_match_the_station_variables(archive):
    # ACDD 1.3 (from memory): geospatial_bounds is OGC WKT; its default CRS EPSG:4326 orders a point's
    # coordinates latitude then longitude
    for path in outputs(archive).values():
        attrs = attrs_of(path)
        with netCDF4.Dataset(path) as nc:
            lat, lon = float(nc["latitude"][...]), float(nc["longitude"][...])
            height = float(nc["sensor_height"][...])
            assert nc["latitude"].units == "degrees_north" and nc["longitude"].units == "degrees_east"
        m = re.fullmatch(r"POINT \((\S+) (\S+)\)", attrs["geospatial_bounds"])
        assert m, attrs["geospatial_bounds"]
        assert (float(m.group(1)), float(m.group(2))) == pytest.approx((lat, lon), abs=1e-6)
        assert attrs["geospatial_bounds_crs"] == "EPSG:4326"
        assert attrs["geospatial_lat_min"] == attrs["geospatial_lat_max"] == pytest.approx(lat)
        assert attrs["geospatial_lon_min"] == attrs["geospatial_lon_max"] == pytest.approx(lon)
        assert attrs["geospatial_vertical_min"] == attrs["geospatial_vertical_max"] == pytest.approx(height)
        assert attrs["geospatial_vertical_units"] == "m" and attrs["geospatial_vertical_positive"] == "up"


def test_vertical_datum_is_named_and_said_to_be_local(archive):
    datums = {s["id"]: s["vertical_datum"] for s in
              tomllib.loads((archive.parent / "sample_raw" / "register.toml").read_text("utf-8"))["site"]}
    for path in outputs(archive).values():
        attrs = attrs_of(path)
        datum = datums[attrs["site_id"]]
        assert attrs["vertical_datum"] == datum
        assert datum in attrs["comment"] and "no EPSG code" in attrs["comment"]
        assert "geospatial_bounds_vertical_crs" not in attrs        # no EPSG code to give for a chart datum


def test_time_coverage_is_the_extent_of_the_time_variables(archive):
    for path in outputs(archive).values():
        names, after_s = COVERAGE[kind_of(path)]
        with netCDF4.Dataset(path) as nc:
            for name in names:
                assert nc[name].units == "seconds since 1970-01-01T00:00:00Z", (path.name, name)
            values = np.concatenate([np.asarray(nc[name][:], dtype=np.float64).ravel() for name in names])
        attrs = attrs_of(path)
        start, end = values.min(), values.max() + after_s
        assert attrs["time_coverage_start"] == iso(start), path.name
        assert attrs["time_coverage_end"] == iso(end), path.name
        assert iso_duration_s(attrs["time_coverage_duration"]) == pytest.approx(end - start, abs=1)
        iso_duration_s(attrs["time_coverage_resolution"])


def test_every_output_is_a_single_timeseries_feature(archive):
    # CF-1.8 section 9.2: a single feature may omit the instance dimension; its instance variables are
    # scalars, one with cf_role timeseries_id, and every data variable names its time and station coordinates
    for path in outputs(archive).values():
        assert attrs_of(path)["featureType"] == "timeSeries"
        time_name = COVERAGE[kind_of(path)][0][0]
        with netCDF4.Dataset(path) as nc:
            roles = [n for n, v in nc.variables.items() if getattr(v, "cf_role", None) == "timeseries_id"]
            assert roles == ["station_id"], path.name
            assert nc["station_id"][...].tobytes().decode().strip("\x00") == attrs_of(path)["station_id"]
            dim = nc[time_name].dimensions
            for name, var in nc.variables.items():
                if var.dimensions == dim and name != time_name:
                    coords = var.coordinates.split()
                    assert time_name in coords and {"latitude", "longitude", "station_id"} <= set(coords), \
                        (path.name, name)


def test_derived_products_name_the_dataset_versions_they_come_from(archive):
    datasets = {p.stem: p for p in (archive / "datasets").rglob("*.nc")}
    for path in outputs(archive).values():
        if kind_of(path) == "dataset":
            continue
        attrs = attrs_of(path)
        ids, digests = attrs["source_dataset_id"].split(), attrs["source_dataset_sha256"].split()
        assert len(ids) == len(digests) >= 1
        assert path.stem.startswith(ids[0] + "_")            # named after the first dataset it comes from
        for name, digest in zip(ids, digests):
            assert hashlib.sha256(datasets[name].read_bytes()).hexdigest() == digest, (path.name, name)
            assert name in attrs["history"] and name in attrs["source"]
        assert attrs["qcpipe_version"] == qcpipe.__version__
        if kind_of(path) != "tide_events":
            # exposure: the station's probe dataset, then its temperature logger's (every demo station has one)
            assert "-probe-" in ids[0] and len(ids) == 2 and "-temp-" in ids[1]


def test_fitted_constants_name_their_dataset_and_its_hash(archive):
    (toml,) = (archive / "derived").rglob("*_constituents.toml")
    source = tomllib.loads(toml.read_text("utf-8"))["tide"]["source"]
    dataset_stem = toml.stem[: -len("_constituents")]
    (dataset,) = (archive / "datasets").rglob(dataset_stem + ".nc")
    assert dataset_stem in source and qcpipe.__version__ in source
    assert f"sha256:{hashlib.sha256(dataset.read_bytes()).hexdigest()}" in source


def test_probe_transitions_have_their_times_as_coordinate(archive):
    # CF-1.8 section 1.3 (coordinate variable): one-dimensional, named as its dimension, strictly monotonic,
    # no missing values
    probes = [p for p in outputs(archive).values() if kind_of(p) == "dataset" and "-probe-" in p.stem]
    assert len(probes) == 3
    for path in probes:
        with netCDF4.Dataset(path) as nc:
            tt = nc["transition_time"]
            assert tt.dimensions == ("transition_time",) and tt.units == "seconds since 1970-01-01T00:00:00Z"
            values = np.ma.getdata(tt[:])
            assert values.size > 10 and not np.ma.is_masked(tt[:]) and np.all(np.diff(values) > 0)
            for name in ("transition_kind", "transition_offset"):
                assert nc[name].dimensions == ("transition_time",)
            times = np.asarray(nc["time"][:])
            assert times[0] <= values[0] and values[-1] <= times[-1]

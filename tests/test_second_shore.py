"""A second invented shore end to end (issue 15 section 4): no published constants, a mainly diurnal tide,
a gauge, a probe that fouls for three days and a station whose loggers run an hour fast.

The scenario and its truth come from tests/scenarios/second_shore.py (seeded); each workspace is run
once through the run sequence without the orchestrator (``nightly_run(ctx, InProcess())``), shared by
the module.

Figures not from the issue: the mean lunar ("tidal") day is 24 h 50 min (common knowledge of the trade,
from memory); Courtier's form factor classes (F = (K1 + O1) / (M2 + S2): 0.25-1.5 mixed, mainly
semidiurnal; 1.5-3 mixed, mainly diurnal; above 3 diurnal) are from memory (Courtier 1938, as quoted in
tide handbooks such as Pugh 1987).
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest

from qcpipe import pipeline
from qcpipe.archive.ncio import read_dataset
from qcpipe.pipeline.clock_fix import apply_clock_correction, plan_clock_correction
from qcpipe.pipeline.references import site_tide
from qcpipe.pipeline.run import InProcess, nightly_run
from tests.scenarios.second_shore import FAST_BY_S, Scenario, make_second_shore

TIDAL_DAY = np.timedelta64(int(24.84 * 3600), "s")     # mean lunar day, 24 h 50 min (from memory)
CLOCK_TOLERANCE_S = 600.0                               # issue 15 section 4: "within 10 min"
MIN_AGREEMENT = 0.97                                    # issue 15 section 4: "at least 97 % of the time"



@dataclass
class ShoreRun:
    """A written scenario and what one nightly run made of it."""
    scenario: Scenario
    ctx: object
    summary: object
    _datasets: dict = field(default_factory=dict)

    def dataset(self, deployment: str):
        if deployment not in self._datasets:
            row = self.ctx.catalog.latest_dataset(deployment)
            assert row is not None, f"no dataset for {deployment}"
            self._datasets[deployment] = read_dataset(row["path"])
        return self._datasets[deployment]

    def notices(self, kind: str | None = None):
        return [n for n in self.summary.all_notices() if kind is None or n.kind == kind]


def _run(root, **kwargs) -> ShoreRun:
    scenario = make_second_shore(root, **kwargs)
    ctx = pipeline.load_context(scenario.workspace)
    return ShoreRun(scenario, ctx, nightly_run(ctx, InProcess()))


@pytest.fixture(scope="module")
def shore(tmp_path_factory) -> ShoreRun:
    """The scenario: gauge, no published constants."""
    return _run(tmp_path_factory.mktemp("second-shore"))


@pytest.fixture(scope="module")
def bare(tmp_path_factory) -> ShoreRun:
    """The same shore without a gauge: no tide reference at all."""
    return _run(tmp_path_factory.mktemp("second-shore-bare"), with_gauge=False)


@pytest.fixture(scope="module")
def control(tmp_path_factory) -> ShoreRun:
    """A control: the scenario's true constants named in the register, as if published."""
    return _run(tmp_path_factory.mktemp("second-shore-control"), name_true_constants=True)


def shore_stations(s: Scenario) -> list[str]:
    return [st for st in s.stations if st != s.gauge_station]


# ----------------------------------------------------------------- the scenario itself (must pass today)

def test_scenario_writes_a_workspace_that_loads(shore):
    s, ctx = shore.scenario, shore.ctx
    for name in ("workspace.toml", "register.toml", "layouts.toml", "rules.toml"):
        assert (s.root / name).is_file()
    assert sorted(p.name for p in s.inbox.rglob("*") if p.is_file()) == sorted(p.name for p in s.files)
    assert sum(p.stat().st_size for p in s.files) < 5e6
    reg = ctx.register
    assert [site.tide_constituents for site in reg.site] == [None]                  # nothing published
    assert {st.id for st in reg.station} == set(s.stations)
    assert {d.id for d in reg.deployment} == set(s.loggers)
    assert {reg.kind_of(d) for d in s.loggers} == {"immersion_probe", "temperature", "pressure"}
    for d in s.fast_deployments:      # the error is undeclared: no offset, no clock check
        dep = reg.deployment_by_id(d)
        assert dep.clock_offset == "+00:00" and dep.clock_check is None
    assert s.fast_station != s.fouled_station
    # four shore stations at distinct heights, the gauge below the lowest water of the record
    elevations = [s.stations[st].elevation_m for st in shore_stations(s)]
    assert len(set(elevations)) == 4
    gauge = s.loggers[s.stations[s.gauge_station].deployments[0]]
    level = s.sea_level(gauge.true_time)
    assert s.stations[s.gauge_station].elevation_m < level.min() - 0.3
    # every shore station is both immersed and emersed during its deployment
    for st in shore_stations(s):
        truth = s.loggers[s.probe_of(st)].immersed
        assert 0.05 < np.mean(truth == 1) < 0.95 and 0.05 < np.mean(truth == 0) < 0.95


def test_scenario_is_deterministic(shore, tmp_path):
    again = make_second_shore(tmp_path)
    for a in shore.scenario.files:
        b = again.inbox / a.relative_to(shore.scenario.inbox)
        assert a.read_bytes() == b.read_bytes(), a.name
    assert (tmp_path / "register.toml").read_text() == (shore.scenario.root / "register.toml").read_text()


def test_true_tide_is_mainly_diurnal(shore):
    s = shore.scenario
    # form factor of the constituents used: Courtier's "mixed, mainly diurnal" class is 1.5-3 (from memory)
    assert 2.0 <= s.form_factor <= 3.0
    # the series itself (nodal factors included): hourly over the record, the diurnal band (0.8-1.2 cycles
    # per day) carries more than twice the amplitude of the semidiurnal band (1.7-2.2 cpd).  Expected about
    # sqrt(sum H^2) ratio of the constituents = 2.49, times f(K1, O1) / f(M2) of early 2027 (nodal factor
    # ranges from memory: K1 0.88-1.12, O1 0.81-1.19, M2 0.96-1.04), so within 2.0-3.2.
    t = np.arange(np.datetime64("2027-02-02T08:00"), np.datetime64("2027-03-02T08:00"),
                  np.timedelta64(1, "h")).astype("datetime64[ns]")
    z = s.tide(t)
    power = np.abs(np.fft.rfft(z - z.mean())) ** 2
    f = np.fft.rfftfreq(z.size, d=1 / 24)
    ratio = np.sqrt(power[(f > 0.8) & (f < 1.2)].sum() / power[(f > 1.7) & (f < 2.2)].sum())
    expected = np.sqrt(sum(a * a for n, a, _, _ in s.constituents if n.endswith("1")) /
                       sum(a * a for n, a, _, _ in s.constituents if n.endswith("2")))
    assert expected == pytest.approx(2.49, abs=0.01)
    assert 2.0 <= ratio <= 3.2
    # daily range (the brief: about 1.5 to 2.5 m at its largest)
    daily = z[: z.size // 24 * 24].reshape(-1, 24)
    assert 1.5 <= np.ptp(daily, axis=1).max() <= 2.5


def test_every_file_ingested_without_quarantine(shore):
    s, summary = shore.scenario, shore.summary
    assert summary.quarantined == []
    assert summary.files_seen == summary.ingested == len(s.files)
    assert sorted(r.deployment for r in summary.results) == sorted(s.loggers)
    for d, truth in s.loggers.items():
        ds = shore.dataset(d)
        kept = truth.read_time[(truth.read_time >= truth.start) & (truth.read_time <= truth.end)]
        np.testing.assert_array_equal(ds["time"].values, kept, err_msg=d)


def test_gauge_water_level_is_the_true_sea_level(shore):
    # the vented recorder's dbar on a ';' decimal-comma layout, through TEOS-10 density, gives back the
    # generator's sea level: residual from the 4 mm (0.004 dbar) reading noise and the 1 mm rounding
    s = shore.scenario
    d = s.stations[s.gauge_station].deployments[0]
    ds = shore.dataset(d)
    true_level = s.sea_level(s.loggers[d].true_time_at(ds["time"].values))
    diff = ds["water_level"].values - true_level
    assert np.sqrt(np.mean(diff ** 2)) < 0.008


def test_temperature_in_fahrenheit_is_read_in_celsius(shore):
    # the temperature buttons write degF: 62-110 degF is 17-43 degC; water temperature in the
    # scenario is about 17.8 degC, so immersed samples sit near it
    s = shore.scenario
    for st in shore_stations(s):
        d = s.companion_of(st)
        ds = shore.dataset(d)
        truth = s.loggers[d].truth_at(ds["time"].values)
        wet = ds["temperature"].values[truth == 1]
        assert abs(np.median(wet) - 17.8) < 1.0, st


# ----------------------------------------------------------------- the clock error

def clock_notices(run: ShoreRun, station: str):
    return [n for n in run.notices("clock") if n.station == station]


def assert_clock_found(run: ShoreRun):
    s = run.scenario
    assert clock_notices(run, s.fast_station), "no clock notice names the fast station"
    attrs = run.dataset(s.probe_of(s.fast_station)).attrs
    assert abs(float(attrs["clock_transition_offset_s"]) - s.fast_by_s) <= CLOCK_TOLERANCE_S
    assert int(attrs["clock_error_suspected"]) == 1


def assert_no_false_clock_verdict(run: ShoreRun):
    s = run.scenario
    threshold = run.ctx.rules.tide_timing.clock_error_threshold
    for st in shore_stations(s):
        if st == s.fast_station:
            continue
        assert clock_notices(run, st) == [], st
        attrs = run.dataset(s.probe_of(st)).attrs
        assert "clock_transition_offset_s" in attrs, f"{st}: no clock verdict was made"
        assert int(attrs["clock_error_suspected"]) == 0, st
        assert abs(float(attrs["clock_transition_offset_s"])) < threshold, st


def test_clock_error_reported_at_the_fast_station(shore):
    assert shore.scenario.fast_by_s == FAST_BY_S
    assert_clock_found(shore)


def test_no_false_clock_verdict_at_the_other_stations(shore):
    assert_no_false_clock_verdict(shore)


def test_control_named_true_constants_find_the_hour_and_nothing_else(control):
    # with the true constants named by hand, transition timing finds the hour too: the site's own gauge
    # (above) does as well as published constants would
    assert_clock_found(control)
    assert_no_false_clock_verdict(control)


# ----------------------------------------------------------------- the fouled probe

_STAMP = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2})?")


def reported_fouled_periods(run: ShoreRun, deployment: str) -> list[tuple[np.datetime64, np.datetime64]]:
    """(start, end) pairs of UTC stamps in the fouling notices of a deployment and in its dataset's
    ``immersion_unreliable_periods`` attribute (time stamps read in pairs from the text)."""
    texts = [n.text for n in run.notices("fouling") if n.deployment == deployment]
    texts += [str(run.dataset(deployment).attrs.get("immersion_unreliable_periods", ""))]
    periods = []
    for text in texts:
        stamps = [np.datetime64(x.replace(" ", "T"), "ns") for x in _STAMP.findall(text)]
        periods += list(zip(stamps[0::2], stamps[1::2]))
    return periods


def test_fouled_period_found_within_a_tidal_day(shore):
    s = shore.scenario
    start, end = s.fouled_period
    periods = reported_fouled_periods(shore, s.fouled_deployment)
    assert any(abs(a - start) <= TIDAL_DAY and abs(b - end) <= TIDAL_DAY for a, b in periods), periods
    # the samples of the period are flagged on the probe's wetness (issue 15 section 2)
    ds = shore.dataset(s.fouled_deployment)
    t = ds["time"].values
    inside = (t >= start) & (t < end)
    assert np.mean(ds["wetness_qc"].values[inside] >= 3) >= 0.8


def test_no_fouling_reported_at_the_healthy_probes(shore):
    s = shore.scenario
    for st in shore_stations(s):
        if st != s.fouled_station:
            assert reported_fouled_periods(shore, s.probe_of(st)) == [], st
            assert [n for n in shore.notices("fouling") if n.station == st] == [], st


# ----------------------------------------------------------------- the state given to companions

@pytest.mark.parametrize("station", [
    "sp-crest",
    "sp-shelf",
    "sp-gully",
    "sp-fringe",
])
def test_companion_immersion_agrees_with_the_truth(shore, station, record_property):
    s = shore.scenario
    d = s.companion_of(station)
    ds = shore.dataset(d)
    state = ds["immersion"].values
    truth = s.loggers[d].truth_at(ds["time"].values)
    known = truth != 2
    unknown = float(np.mean(state[known] == 2))
    compared = known & (state != 2)
    agreement = float(np.mean(state[compared] == truth[compared]))
    record_property("agreement", round(agreement, 4))
    record_property("fraction_unknown", round(unknown, 4))
    print(f"{station}: agreement {agreement:.4f} over {compared.sum()} samples, unknown {unknown:.4f}, "
          f"truth undefined {np.mean(~known):.4f}")
    assert unknown <= 0.05, f"state unknown at {unknown:.1%} of the samples whose truth is known"
    assert agreement >= MIN_AGREEMENT, f"agreement {agreement:.4f}, unknown {unknown:.4f}"


# ----------------------------------------------------------------- a site with no tide reference at all

def test_bare_site_ingests_everything(bare, shore):
    s = bare.scenario
    assert s.gauge_station is None and bare.summary.quarantined == []
    assert bare.summary.files_seen == bare.summary.ingested == len(s.files)
    assert sorted(r.deployment for r in bare.summary.results) == sorted(s.loggers)
    # the same shore as with the gauge: only the gauge's file is missing
    with_gauge = {p.name: p.read_bytes() for p in shore.scenario.files}
    assert set(with_gauge) - {p.name for p in s.files} == {"DR-0577.dpt"}
    assert all(p.read_bytes() == with_gauge[p.name] for p in s.files)


def says_no_tide_reference(text: str) -> bool:
    """The substance of the no-reference notice (its words may change)."""
    t = text.lower()
    return "clock" in t and "consistency" in t and ("tide" in t or "reference" in t)


def test_bare_site_says_clock_and_consistency_checks_could_not_run(bare):
    probes = {d.id for d in bare.ctx.register.deployment if bare.ctx.register.kind_of(d.id) == "immersion_probe"}
    said = {n.deployment for n in bare.summary.all_notices() if n.kind == "tide" and says_no_tide_reference(n.text)}
    assert said == probes


# ----------------------------------------------------------------- applying the correction

@pytest.fixture(scope="module")
def corrected(tmp_path_factory) -> ShoreRun:
    """The scenario after a person confirmed the fast station's clock verdict for the station (its own copy)."""
    run = _run(tmp_path_factory.mktemp("second-shore-corrected"))
    s = run.scenario
    plan = plan_clock_correction(run.ctx, s.probe_of(s.fast_station), confirmed_by="A. Tester", station=True)
    summary = apply_clock_correction(run.ctx, plan, InProcess())
    ctx = pipeline.load_context(s.workspace)
    return ShoreRun(s, ctx, summary)


def test_clock_correction_brings_the_transitions_back(corrected):
    s = corrected.scenario
    assert sorted(r.deployment for r in corrected.summary.results) == sorted(s.fast_deployments)
    for d in s.fast_deployments:
        ds = corrected.dataset(d)
        truth = s.loggers[d]
        shift = float(ds.attrs["clock_correction_applied_s"])
        t = ds["time"].values
        true = truth.true_time_at(t + np.timedelta64(int(shift), "s"))    # the samples the logger stamped so
        # as close to the true UTC as the verdict was to the true error (issue 15 section 4: 10 min). The
        # estimate is the probe's transition timing, which also holds the probe's own response delay at
        # wetting and drying (this scenario's wetting ramp: about 3 min at the healthy stations; 5 min here)
        assert np.abs((t - true).astype("timedelta64[s]").astype(float)).max() <= CLOCK_TOLERANCE_S
        assert t[0] >= truth.start and t[-1] <= truth.end
        assert "A. Tester" in ds.attrs["history"]
    attrs = corrected.dataset(s.probe_of(s.fast_station)).attrs
    # "within a few minutes of the reference" (issue 15 section 4): 5 min
    assert abs(float(attrs["clock_transition_offset_s"])) <= 300
    assert int(attrs["clock_error_suspected"]) == 0
    assert not [n for n in corrected.summary.all_notices() if n.kind == "clock"]


def test_the_site_fit_is_written_and_predicts_the_true_tide(shore):
    """Without published constants the site's own gauge gives them (issue 15 section 1)."""
    s = shore.scenario
    record = json.loads((shore.ctx.paths.site_product(s.site_id, "fitted_constituents.json")).read_text())
    assert record["record_days"] >= 15 and set(record["gauge_datasets"]) == {
        d for d in s.loggers if shore.ctx.register.kind_of(d) == "pressure"}
    for dep, src in record["source_datasets"].items():      # provenance: the gauge datasets' files, by SHA-256
        path = Path(shore.ctx.catalog.latest_dataset(dep)["path"])
        assert src["dataset"] == path.name and src["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    tide = site_tide(shore.ctx, s.site_id)
    t = np.arange(np.datetime64(record["start"].rstrip("Z"), "ns"), np.datetime64(record["end"].rstrip("Z"), "ns"),
                  np.timedelta64(30, "m"))
    rms = float(np.sqrt(np.mean((tide.predicted(t) - s.tide(t)) ** 2)))
    # 0.06 m: the gauge record carries the scenario's weather residual (about +-7 cm) and a 28-day fit
    # cannot separate P1 from K1 or K2 from S2 (Rayleigh criterion); within the record the fit follows them
    assert rms < 0.06, rms


def test_probes_were_checked_against_the_observed_gauge(shore):
    for dep in shore.scenario.loggers:
        if shore.ctx.register.kind_of(dep) != "immersion_probe":
            continue
        src = shore.dataset(dep)["tide_reference_source"].values
        # 1: observed gauge level; the rest (3: fitted constants) only where the gauge has no sample
        assert np.mean(src == 1) > 0.95 and set(np.unique(src)) <= {1, 3}, dep


def test_the_report_shows_the_reference_and_the_fouled_period(shore):
    s = shore.scenario
    pages = {p.name: p.read_text("utf-8") for p in Path(shore.summary.report).parent.rglob("*.html")}
    page = next(text for name, text in pages.items() if s.fouled_station in name)
    assert "tide reference (checked against)" in page and "observed gauge level" in page
    assert "probe unreliable (fouled or buried)" in page
    start, end = s.fouled_period
    stamps = [np.datetime64(x.replace(" ", "T"), "ns") for x in _STAMP.findall(page)]
    assert any(abs(a - start) <= TIDAL_DAY for a in stamps) and any(abs(b - end) <= TIDAL_DAY for b in stamps)

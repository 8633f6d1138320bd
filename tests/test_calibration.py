"""Calibration from a freezing assay: CSV format, maximum-likelihood fit, upper bound, calibration files.

Simulated assays use fixed seeds and invented parameters (labelled as such); published checks name
their source.
"""

import hashlib
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import beta as beta_dist
from scipy.stats import norm

from planner import calibration as cal
from planner import nucleation as nuc
from planner.errors import ExtrapolationWarning, InputError

ROOT = Path(__file__).resolve().parents[1]
ASSAYS = ROOT / "protocols" / "assays"
HEADER = ",".join(cal.COLUMNS)


def hold_row(sid, temp_c, hours, frozen, time_h=None, volume_ml=1):
    t = "" if time_h is None else f"{time_h:.5f}"
    return f"{sid},hold,{volume_ml},,,,{temp_c},{hours},{'yes' if frozen else 'no'},{t}"


def simulate_holds(rng, ln_rate_6k, slope, liquidus_c=-0.5, temps_c=(-4.5, -6.5, -8.5), n=12, hours=12.0,
                   volume_ml=1.0, with_times=True):
    """Invented assay drawn from the rate model: exponential waiting times at each hold."""
    rows = [f"# liquidus_c: {liquidus_c}", HEADER]
    k = 0
    for tc in temps_c:
        x = liquidus_c - tc
        w = math.exp(ln_rate_6k + slope * (x - 6.0)) * volume_ml * 1e-6
        for _ in range(n):
            k += 1
            tf = rng.exponential(1 / w) / 3600
            if tf < hours:
                rows.append(hold_row(f"s{k}", tc, hours, True, tf if with_times else None, volume_ml))
            else:
                rows.append(hold_row(f"s{k}", tc, hours, False, None, volume_ml))
    return "\n".join(rows)


def simulate_ramps(rng, ln_rate_6k, slope, n=30, rate_c_per_min=0.5, volume_ml=0.5, lowest=20.0, liquidus_c=-0.6):
    """Invented ramp assay: survival S(X) = exp(-K e^(a - b x_ref) expm1(b X)/b) inverted for X."""
    rows = [f"# liquidus_c: {liquidus_c}", HEADER]
    k_ = volume_ml * 1e-6 / (rate_c_per_min / 60)
    for i in range(n):
        x = math.log1p(slope * rng.exponential() / (k_ * math.exp(ln_rate_6k - slope * 6.0))) / slope
        if x < lowest:
            rows.append(f"r{i},ramp,{volume_ml},{rate_c_per_min},{liquidus_c - x:.3f},,,,yes,")
        else:
            rows.append(f"r{i},ramp,{volume_ml},{rate_c_per_min},,{liquidus_c - lowest:.3f},,,no,")
    return "\n".join(rows)


# --- the binomial bound ----------------------------------------------------------------------------------
@pytest.mark.parametrize("n", [5, 20, 60])
def test_no_frozen_samples_gives_the_binomial_upper_bound(n):
    # one-sided 95 % Clopper-Pearson bound with 0 of n frozen: 1 - 0.05^(1/n) (scipy.stats.beta as reference)
    rows = ["# liquidus_c: -0.5", HEADER] + [hold_row(f"s{i}", -5.0, 24, False) for i in range(n)]
    c = cal.fit_assay(cal.parse_assay("\n".join(rows)))
    assert c.kind == "upper-bound" and c.log_likelihood is None
    p_bound = -math.expm1(-1e-6 * 24 * 3600 * float(c.rate(4.5)))
    assert p_bound == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-9)
    assert round(p_bound, 4) == round(float(beta_dist.ppf(0.95, 1, n)), 4)
    model = c.to_model()
    r = nuc.freeze_probability([0, 24 * 3600.0], [268.15, 268.15], 1e-6, model, liquidus=272.65, draws=200)
    assert r.upper_bound_only and r.interval[0] == 0.0
    assert r.probability == pytest.approx(p_bound, rel=1e-6)
    assert any("upper bound" in f.message for f in r.flags)


# --- the fit ---------------------------------------------------------------------------------------------
def test_coverage_of_the_90_percent_interval():
    # 200 invented assays from known parameters (fixed seeds): the 90 % interval must cover the truth in
    # 85-95 % of them, for ln(rate) at 6 K and for ln(slope)
    truth_a, truth_b = math.log(30.0), 0.5
    cover_a = cover_b = 0
    z = norm.ppf(0.95)
    for seed in range(200):
        rng = np.random.default_rng(seed)
        c = cal.fit_assay(cal.parse_assay(simulate_holds(rng, truth_a, truth_b)))
        lo, hi = c.log_rate_interval(6.0, 0.90)
        cover_a += lo <= truth_a <= hi
        se_b = math.sqrt(c.covariance[1][1])
        cover_b += abs(c.log_slope - math.log(truth_b)) <= z * se_b
    assert 0.85 <= cover_a / 200 <= 0.95
    assert 0.85 <= cover_b / 200 <= 0.95


def test_ramp_assay_recovers_its_parameters():
    rng = np.random.default_rng(3)
    truth_a, truth_b = math.log(300.0), 0.45
    c = cal.fit_assay(cal.parse_assay(simulate_ramps(rng, truth_a, truth_b, n=200)))
    assert c.kind == "fit" and not c.slope_fixed
    lo, hi = c.log_rate_interval(6.0, 0.999)
    assert lo <= truth_a <= hi
    assert abs(c.log_slope - math.log(truth_b)) < 4 * math.sqrt(c.covariance[1][1])
    assert all(0 <= r["observed"] <= 1 and 0 <= r["predicted"] <= 1 for r in c.goodness_of_fit)
    assert {r["kind"] for r in c.goodness_of_fit} == {"ramp"}


def test_interval_censored_holds_are_used():
    rng = np.random.default_rng(5)
    text = simulate_holds(rng, math.log(30.0), 0.5, n=40, with_times=False)
    c = cal.fit_assay(cal.parse_assay(text))
    lo, hi = c.log_rate_interval(6.0, 0.999)
    assert lo <= math.log(30.0) <= hi


def test_one_temperature_keeps_the_slope_prior():
    rng = np.random.default_rng(9)
    c = cal.fit_assay(cal.parse_assay(simulate_holds(rng, math.log(30.0), 0.5, temps_c=(-6.5,), n=30)))
    assert c.slope_fixed
    prior = nuc.preset(cal.SLOPE_PRIOR_PRESET).volume
    assert c.log_slope == prior.mean[1]
    assert c.covariance[1][1] == pytest.approx(prior.covariance[1][1])
    assert any("one temperature" in f.message for f in c.flags)
    # the single-hold fit is the closed-form exposure estimate: frozen count / (V x time at risk)
    d = cal._arrays(cal.parse_assay(simulate_holds(np.random.default_rng(9), math.log(30.0), 0.5, temps_c=(-6.5,), n=30)))
    assert math.exp(c.ln_rate_ref) == pytest.approx(np.sum(d.hd) / np.sum(d.he), rel=1e-5)


def test_goodness_of_fit_and_rate_scalar_array():
    c = cal.fit_assay(cal.read_assay(ASSAYS / "demo-saline-holds.csv"))
    rows = c.goodness_of_fit
    assert len(rows) == 3 and all(r["kind"] == "hold" and r["samples"] == 12 for r in rows)
    assert isinstance(float(c.rate(6.0)), float)
    arr = c.rate(np.array([4.0, 6.0]))
    assert arr[1] == pytest.approx(float(c.rate(6.0)))


def test_extrapolation_outside_the_assay_is_flagged():
    c = cal.fit_assay(cal.read_assay(ASSAYS / "demo-saline-holds.csv"))
    m = c.to_model()
    t = [0.0, 3600.0]
    inside = nuc.freeze_probability(t, [267.65, 267.65], 1e-6, m, liquidus=272.6, draws=100)
    with pytest.warns(ExtrapolationWarning):
        far = nuc.freeze_probability(t, [257.15, 257.15], 1e-6, m, liquidus=272.6, draws=100)
    assert not any(f.code == "extrapolated" for f in inside.flags)
    assert any(f.code == "extrapolated" for f in far.flags)


# --- malformed CSV ------------------------------------------------------------------------------------------
GOOD_ROW = "s1,hold,1,,,,-5,24,no,"


@pytest.mark.parametrize(
    ("rows", "match"),
    [
        ([GOOD_ROW.replace(",1,", ",one,", 1)], r"row 3, column volume_ml.*'one'"),
        (["s1,rmap,1,,,,-5,24,no,"], r"row 3, column kind.*did you mean 'ramp'"),
        (["s1,hold,1,,,,-5,24,maybe,"], r"row 3, column frozen.*'maybe'"),
        (["s1,hold,1,0.5,,,-5,24,no,"], r"row 3, column cooling_rate_c_per_min.*empty for a hold row"),
        (["s1,ramp,1,0.5,2.0,,,,yes,"], r"row 3, column freezing_temperature_c"),
        (["s1,hold,1,,,,-5,24,yes,30"], r"row 3, column time_frozen_h.*'30'"),
        (["s1,hold,1,,,,-5,24,no,5"], r"row 3, column time_frozen_h.*empty when frozen is no"),
        ([GOOD_ROW, GOOD_ROW], r"row 4, column sample_id.*also on row 3"),
        (["s1,hold,1,,,,-5,24"], r"row 3.*8 cells"),
        (["s1,ramp,1,0.5,,,,,no,"], r"row 3, column lowest_temperature_c"),
        (["s1,hold,1,,,,-5,-2,no,"], r"row 3, column hours_held.*'-2'"),
    ],
)
def test_malformed_rows_name_row_column_and_value(rows, match):
    text = "\n".join(["# liquidus_c: -0.5", HEADER, *rows])
    with pytest.raises(InputError, match=match):
        cal.parse_assay(text, "assay.csv")


def test_header_and_metadata_errors():
    with pytest.raises(InputError, match="liquidus_c"):
        cal.parse_assay("\n".join([HEADER, GOOD_ROW]))
    with pytest.raises(InputError, match="column volume_mL.*did you mean 'volume_ml'"):
        cal.parse_assay("\n".join(["# liquidus_c: -0.5", HEADER.replace("volume_ml", "volume_mL"), GOOD_ROW]))
    with pytest.raises(InputError, match="no samples"):
        cal.parse_assay("\n".join(["# liquidus_c: -0.5", HEADER]))


# --- calibration files --------------------------------------------------------------------------------------
def test_save_load_round_trip_and_never_overwrite(tmp_path):
    src = ASSAYS / "demo-saline-holds.csv"
    data = tmp_path / src.name
    data.write_bytes(src.read_bytes())
    c = cal.fit_assay(cal.read_assay(data))
    assert c.data_sha256 == hashlib.sha256(src.read_bytes()).hexdigest()
    path = cal.save_calibration(c, tmp_path / "saline.calibration.yaml")
    back = cal.load_calibration(path)
    assert back.ln_rate_ref == c.ln_rate_ref and back.covariance == c.covariance
    assert back.goodness_of_fit == c.goodness_of_fit
    model, _ = cal.calibration_model(path)
    assert model.kind == "fit" and model.volume.mean == (c.ln_rate_ref, c.log_slope)
    before = path.read_bytes()
    with pytest.raises(InputError, match="never overwritten"):
        cal.save_calibration(c, path)
    assert path.read_bytes() == before


def test_changed_assay_data_fails_verification(tmp_path):
    src = ASSAYS / "demo-saline-holds.csv"
    data = tmp_path / src.name
    data.write_bytes(src.read_bytes())
    path = cal.save_calibration(cal.fit_assay(cal.read_assay(data)), tmp_path / "c.yaml")
    data.write_text(data.read_text().replace("-4.5,48,no", "-4.5,48,yes", 1))
    with pytest.raises(InputError, match="unchanged"):
        cal.load_calibration(path)
    # the data file may be absent (archived elsewhere): the calibration still loads, carrying its hash
    data.unlink()
    assert cal.load_calibration(path).data_sha256


def test_not_a_calibration_file_is_refused(tmp_path):
    p = tmp_path / "x.yaml"
    p.write_text("format: something else\n")
    with pytest.raises(InputError, match="calibration file"):
        cal.load_calibration(p)


def _assay_text(groups, liquidus_c=-0.5, hours=24.0):
    """Invented hold assay: (temperature C, frozen, unfrozen) per group, 1 mL each, no freezing times."""
    rows = [f"# liquidus_c: {liquidus_c}", HEADER]
    k = 0
    for temp_c, n_frozen, n_unfrozen in groups:
        for i in range(n_frozen + n_unfrozen):
            k += 1
            rows.append(hold_row(f"g{k}", temp_c, hours, i < n_frozen))
    return "\n".join(rows)


def test_a_fit_that_misses_a_group_says_so():
    # Invented assay no rate model that rises with supercooling can describe: half of the warm and the cold
    # holds froze, none of the 20 in between. The exact two-sided binomial test (common practice, no source)
    # of 0 of 20 against the fitted fraction is far below 5 %: the fit must be flagged.
    c = cal.fit_assay(cal.parse_assay(_assay_text([(-4.5, 10, 10), (-6.5, 0, 20), (-8.5, 10, 10)])))
    misfit = [f for f in c.flags if "does not describe" in f.message]
    assert misfit and "-6.50 C" in misfit[0].message


def test_a_fit_that_describes_its_groups_is_not_flagged():
    # invented assay whose fraction frozen rises smoothly with supercooling: no group departs at the 5 % level
    c = cal.fit_assay(cal.parse_assay(_assay_text([(-4.5, 2, 18), (-6.5, 6, 14), (-8.5, 14, 6)])))
    assert not [f for f in c.flags if "does not describe" in f.message]

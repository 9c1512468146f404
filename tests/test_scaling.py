"""Finite-size scaling of run tables.

These are self-consistency checks of the fitting (fact of the trade: weighted least
squares recovers the parameters of the model it fits within its reported standard
errors); no published result is involved. The synthetic tables have a known plateau,
a known 1/L correction and a known saturation-time exponent (mpsobs.synthetic); every
tolerance is 4 reported standard errors.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from mpsobs import workflow
from mpsobs.analysis import scaling
from mpsobs.analysis.synthetic import SaturationLaw, saturating_results
from mpsobs.core.errors import InputError
from mpsobs.core.printing import with_error

LENGTHS = (8, 12, 16, 24)
TIMES = np.arange(0.0, 200.0 + 1e-9, 0.5)
LAWS = {
    "number@b2": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0, s_thermo=0.65),
    # starts above zero: t_f is the time to cover the fraction f of the rise
    "energy@b3": SaturationLaw(s_inf=0.60, c=-0.5, tau0=0.3, z=0.7, s_initial=0.2,
                               s_thermo=0.66, c_thermo=-0.3),
}
SIGMAS = 4.0  # tolerance in reported standard errors
FRACTION = 0.9
STDERR = 0.01  # S_obs_err = STDERR * sqrt(L) nats


def _results(stderr: float) -> pd.DataFrame:
    return saturating_results(LENGTHS, TIMES, LAWS, stderr=stderr, seed=1,
                              parameters={"Delta": [0.5, 1.0]})


@pytest.fixture(scope="module", params=[STDERR, 0.0], ids=["sampled", "exact"])
def table(request) -> pd.DataFrame:
    return scaling.scaling_table(_results(request.param), window=0.3, fraction=FRACTION)


def _within(value, truth, err) -> None:
    value, truth, err = (np.asarray(a, dtype=float) for a in (value, truth, err))
    # ERROR_FLOOR: noiseless curves can be exact to rounding
    assert np.all(np.abs(value - truth) <= SIGMAS * err + scaling.ERROR_FLOOR), (
        value, truth, err)


@pytest.mark.parametrize("noise", [0.3, 3.0], ids=["overstated_errors", "understated_errors"])
def test_fit_line_matches_numpy_polyfit(noise):
    # reference library: numpy.polyfit with weights 1/sigma and the unscaled covariance;
    # the errors are scaled by sqrt(chi2_red) only when chi2_red > 1 (Particle Data
    # Group scale factor)
    rng = np.random.default_rng(7)
    x = np.linspace(0.0, 1.0, 9)
    sigma = rng.uniform(0.05, 0.2, x.size)
    y = 1.5 - 0.7 * x + noise * sigma * rng.standard_normal(x.size)
    fit = scaling.fit_line(x, y, sigma)
    coef, cov = np.polyfit(x, y, 1, w=1 / sigma, cov="unscaled")
    assert fit.dof == x.size - 2
    assert fit.chi2 == pytest.approx(np.sum(((y - np.polyval(coef, x)) / sigma) ** 2))
    assert (fit.chi2_red > 1) == (noise > 1)
    scale = fit.chi2_red if noise > 1 else 1.0
    assert fit.slope == pytest.approx(coef[0], rel=1e-10)
    assert fit.intercept == pytest.approx(coef[1], rel=1e-10)
    assert fit.slope_err == pytest.approx(np.sqrt(cov[0, 0] * scale), rel=1e-10)
    assert fit.intercept_err == pytest.approx(np.sqrt(cov[1, 1] * scale), rel=1e-10)


def test_one_row_per_length_coarse_graining_and_parameter(table):
    assert len(table) == len(LENGTHS) * len(LAWS) * 2
    assert not table.duplicated(["coarse_graining", "Delta", "L"]).any()
    for name in ("plateau_per_site", "plateau_err", "extrapolated_per_site",
                 "extrapolated_err"):
        assert np.isfinite(table[name]).all(), name


def test_plateau_recovers_known_value(table):
    truth = [LAWS[cg].plateau(L) for cg, L in zip(table.coarse_graining, table.L, strict=True)]
    _within(table.plateau_per_site, truth, table.plateau_err)


def test_plateau_error_is_at_least_the_propagated_standard_error():
    # plateau_err = max(s, rms(e)) / sqrt(n): never below rms(e) / sqrt(n); for pure
    # noise s / rms(e) - 1 has standard deviation ~ sqrt(1 / (2 (n - 1))) (handbook
    # formula for the sample standard deviation of Gaussian data, from memory)
    table = scaling.scaling_table(_results(STDERR), window=0.3, fraction=FRACTION)
    n = table.plateau_points.to_numpy()
    rms = STDERR / np.sqrt(table.L.to_numpy())  # S_obs_err / L of the synthetic table
    propagated = rms / np.sqrt(n)
    assert np.all(table.plateau_err >= propagated * (1 - 1e-12))
    assert np.all(table.plateau_err <= propagated * (1 + SIGMAS / np.sqrt(2 * (n - 1))))


def test_deficit_from_thermodynamic_reference(table):
    law = [LAWS[cg] for cg in table.coarse_graining]
    thermo = [g.s_thermo + g.c_thermo / L for g, L in zip(law, table.L, strict=True)]
    assert np.allclose(table.thermo_per_site, thermo, rtol=1e-12)
    truth = [t - g.plateau(L) for t, g, L in zip(thermo, law, table.L, strict=True)]
    _within(table.deficit_per_site, truth, table.deficit_err)


def test_extrapolation_recovers_infinite_length_value_and_correction(table):
    groups = table.drop_duplicates(["coarse_graining", "Delta"])
    law = [LAWS[cg] for cg in groups.coarse_graining]
    _within(groups.extrapolated_per_site, [g.s_inf for g in law], groups.extrapolated_err)
    _within(groups.finite_size_slope, [g.c for g in law], groups.finite_size_slope_err)
    assert (groups.extrapolation_lengths == len(LENGTHS)).all()
    # repeated on every row of the group
    spread = table.groupby(["coarse_graining", "Delta"]).extrapolated_per_site.nunique()
    assert (spread == 1).all()


def test_saturation_time_and_exponent(table):
    # t_f = tau0 L^z ln(1 / (1 - f)) for the synthetic law
    law = [LAWS[cg] for cg in table.coarse_graining]
    truth = [g.relaxation_time(L) * np.log(1 / (1 - FRACTION))
             for g, L in zip(law, table.L, strict=True)]
    _within(table.saturation_time, truth, table.saturation_time_err)
    groups = table.drop_duplicates(["coarse_graining", "Delta"])
    _within(groups.z, [LAWS[cg].z for cg in groups.coarse_graining], groups.z_err)
    _within(groups.saturation_prefactor,
            [LAWS[cg].tau0 * np.log(1 / (1 - FRACTION)) for cg in groups.coarse_graining],
            groups.saturation_prefactor_err)


def test_saturation_time_ignores_a_later_dip():
    # a revival-like dip well after saturation, before the plateau window, must not
    # change t_f (it would if all the time spent below the level were counted)
    results = _results(STDERR)
    dipped = results.copy()
    during = (dipped.t > 80) & (dipped.t < 90)
    dipped.loc[during, "S_obs"] *= 0.5
    plain = scaling.saturation_times(results, fraction=FRACTION)
    assert np.array_equal(scaling.saturation_times(dipped, fraction=FRACTION).saturation_time,
                          plain.saturation_time)


def test_notebook_functions_agree_with_table():
    results = _results(STDERR)
    plateau = scaling.plateaus(results, window=0.3)
    extrapolated = scaling.extrapolate(plateau)
    times = scaling.saturation_times(results, fraction=FRACTION, window=0.3)
    exponent = scaling.fit_exponent(times)
    assert list(scaling.key_columns(extrapolated)) == ["coarse_graining", "Delta"]
    assert len(extrapolated) == len(exponent) == len(LAWS) * 2
    full = scaling.scaling_table(results, 0.3, FRACTION)
    merged = full.merge(extrapolated, on=["coarse_graining", "Delta"], suffixes=("", "_b"))
    assert np.array_equal(merged.extrapolated_per_site, merged.extrapolated_per_site_b)
    assert np.array_equal(full.saturation_time, times.saturation_time)


def test_scale_run_writes_tables_and_collapse(tmp_path):
    results = _results(STDERR)
    results.to_parquet(tmp_path / "results.parquet")
    table = workflow.scale(tmp_path, window=0.3, fraction=FRACTION)
    for name in ("scaling.csv", "scaling.parquet", "figures/collapse.png",
                 "figures/collapse.pdf"):
        assert (tmp_path / name).stat().st_size > 0, name
    assert (tmp_path / "figures" / "collapse.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (tmp_path / "figures" / "collapse.pdf").read_bytes()[:5] == b"%PDF-"
    stored = pd.read_parquet(tmp_path / "scaling.parquet")
    pd.testing.assert_frame_equal(stored, table)
    csv = pd.read_csv(tmp_path / "scaling.csv")
    assert np.allclose(csv.plateau_per_site, table.plateau_per_site, rtol=1e-12)
    text = scaling.format_table(table)
    for row in table.drop_duplicates(["coarse_graining", "Delta"]).itertuples():
        assert with_error(row.extrapolated_per_site, row.extrapolated_err) in text


def test_collapse_curves_rescale_time_and_rise():
    results = _results(STDERR)
    table = scaling.scaling_table(results)
    collapse = scaling.collapse_curves(results, table)
    assert len(collapse) == len(results)
    row = table.iloc[0]
    mine = collapse[(collapse.coarse_graining == row.coarse_graining)
                    & (collapse.Delta == row.Delta) & (collapse.L == row.L)]
    assert np.allclose(mine.scaled_time, mine.t / row.L ** row.z)
    assert mine.rise.iloc[0] == pytest.approx(0.0, abs=1e-12)  # measured from S_obs(0)


def test_columns_fixed_by_length_or_coarse_graining_do_not_split_groups(caplog):
    results = _results(STDERR)
    results["chi_max"] = 8 * results.L  # swept together with L
    results["block_size"] = results.coarse_graining.str[-1].astype(int)
    results["field_seed"] = None  # an unset parameter: object column of None
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        table = scaling.scaling_table(results)
    assert "chi_max change(s) together with L" in caplog.text
    assert len(scaling.collapse_curves(results, table)) == len(results)
    assert "chi_max" not in table.columns
    assert len(table) == len(LENGTHS) * len(LAWS) * 2
    assert (table.extrapolation_lengths == len(LENGTHS)).all()
    text = scaling.format_table(table)
    assert "Delta" in text and "block_size" not in text  # only varying parameters shown


def test_missing_columns_are_named():
    results = _results(STDERR).drop(columns=["S_thermo", "S_obs_err"])
    with pytest.raises(InputError, match="S_obs_err, S_thermo"):
        scaling.scaling_table(results)


def test_single_length_is_an_error(tmp_path):
    results = _results(STDERR)
    results = results[results.L == 8]
    with pytest.raises(InputError, match="only one chain length"):
        scaling.scaling_table(results)
    results.to_parquet(tmp_path / "results.parquet")
    with pytest.raises(InputError, match="only one chain length"):
        workflow.scale(tmp_path)
    assert not (tmp_path / "scaling.csv").exists()
    assert not (tmp_path / "figures").exists()
    # the per-length plateaus alone do not need several lengths
    assert len(scaling.plateaus(results)) == len(LAWS) * 2


def test_bad_options_and_tables_are_rejected(tmp_path):
    results = _results(STDERR)
    with pytest.raises(InputError, match="window"):
        scaling.scaling_table(results, window=0.0)
    with pytest.raises(InputError, match="fraction"):
        scaling.scaling_table(results, fraction=1.0)
    with pytest.raises(InputError, match="several rows share the same t"):
        scaling.scaling_table(pd.concat([results, results]))
    with pytest.raises(InputError, match="run_dir"):
        workflow.scale(tmp_path / "missing")
    unknown = results.copy()
    unknown.loc[3, "S_obs_err"] = np.nan
    with pytest.raises(InputError, match="S_obs_err is not a finite number in 1 rows"):
        scaling.scaling_table(unknown)
    with pytest.raises(InputError, match="window"):
        scaling.plateaus(results, window=1e-4)  # fewer than 2 points in the window


def test_unsaturated_curve_is_flagged_and_its_error_widened(caplog):
    # relaxation time comparable to the window: the window mean is still rising
    slow = {"slow": SaturationLaw(s_inf=0.5, c=0.0, tau0=4.0, z=1.0)}
    results = saturating_results((8, 16), np.arange(0.0, 60.0, 0.5), slow,
                                 stderr=0.001, seed=3)
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        plateau = scaling.plateaus(results)
    assert "has not saturated" in caplog.text
    row = plateau[plateau.L == 16].iloc[0]
    assert row.plateau_err >= abs(row.plateau_drift)
    _within(row.plateau_per_site, slow["slow"].per_site(16, [row.t_last])[0],
            row.plateau_err)


# --------------------------------------------------------------------------- disorder

DISORDER_LAW = {"number@b2": SaturationLaw(s_inf=0.55, c=-0.8, tau0=0.5, z=1.0,
                                           s_eq=0.62)}
REALIZATIONS = 40
DISORDER_SD = 0.04  # per-site standard deviation of the realizations' plateaus
DISORDER_TIMES = np.arange(0.0, 100.0 + 1e-9, 1.0)


def _disordered(stderr: float = STDERR, **options) -> pd.DataFrame:
    return saturating_results((8, 12, 16), DISORDER_TIMES, DISORDER_LAW, stderr=stderr,
                              seed=7, realizations=REALIZATIONS, disorder_sd=DISORDER_SD,
                              **options)


def test_disorder_average_recovers_the_ensemble_plateau_and_its_spread():
    plateau = scaling.plateaus(_disordered())
    law = DISORDER_LAW["number@b2"]
    assert len(plateau) == 3 and (plateau.realizations == REALIZATIONS).all()
    assert "field_seed" not in plateau.columns  # averaged over, not a group
    _within(plateau.plateau_per_site, [law.plateau(L) for L in plateau.L],
            plateau.plateau_err)
    # sample-to-sample spread: the realizations' plateau deviation plus the sampling
    # noise of a window mean (n points of per-site error STDERR sqrt(L) / L each)
    n = plateau.plateau_points.to_numpy()
    sampling_var = (STDERR * np.sqrt(plateau.L) / plateau.L) ** 2 / n
    spread = np.sqrt(DISORDER_SD**2 + sampling_var)
    measured = plateau.plateau_disorder_err * np.sqrt(REALIZATIONS)
    # standard error of a sample standard deviation: sigma / sqrt(2 (R - 1)) (normal
    # samples; handbook formula, e.g. Kendall & Stuart, from memory)
    _within(measured, spread, spread / np.sqrt(2 * (REALIZATIONS - 1)))
    _within(plateau.plateau_sampling_err, np.sqrt(sampling_var / REALIZATIONS),
            0.1 * np.sqrt(sampling_var / REALIZATIONS))
    assert np.allclose(plateau.plateau_err, np.maximum(plateau.plateau_disorder_err,
                                                       plateau.plateau_sampling_err))


def test_disorder_average_of_the_rows():
    results = _disordered()
    mean = scaling.disorder_average(results)
    assert len(mean) == len(results) // REALIZATIONS
    assert "field_seed" not in mean.columns and "point_id" not in mean.columns
    by_hand = results.groupby(["L", "t"]).S_obs
    mean = mean.set_index(["L", "t"]).sort_index()
    assert np.allclose(mean.S_obs, by_hand.mean())
    assert np.allclose(mean.S_obs_disorder_err, by_hand.std(ddof=1) / np.sqrt(REALIZATIONS))
    err = results.groupby(["L", "t"]).S_obs_err.apply(lambda e: np.sqrt(np.sum(e**2)))
    assert np.allclose(mean.S_obs_sampling_err, err / REALIZATIONS)
    assert (mean.realizations == REALIZATIONS).all()


def test_fits_use_the_disorder_error(caplog):
    table = scaling.scaling_table(_disordered())
    law = DISORDER_LAW["number@b2"]
    row = table.iloc[0]
    _within(row.extrapolated_per_site, law.s_inf, row.extrapolated_err)
    # without the disorder marking every seed is a parameter set of its own (with a hint)
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        blind = scaling.plateaus(_disordered().drop(columns=["disorder_axes"]))
    assert len(blind) == REALIZATIONS * len(table) and "field_seed" in blind.columns
    assert "mark them with sweep.disorder" in caplog.text
    text = scaling.format_table(table)
    assert " R " in text.splitlines()[1] and str(REALIZATIONS) in text


# --------------------------------------------------------------------------- truncation


def test_only_trusted_times_enter_plateau_and_saturation(caplog):
    law = DISORDER_LAW["number@b2"]
    results = saturating_results((8, 12, 16), DISORDER_TIMES, DISORDER_LAW, stderr=STDERR,
                                 seed=2, trusted_until=70.0)
    with caplog.at_level("INFO", logger="mpsobs.analysis.curves"):
        table = scaling.scaling_table(results)
    assert "up to t_trusted = 70" in caplog.text
    assert (table.t_last == 70.0).all() and table.trusted_only.all()
    _within(table.plateau_per_site, [law.plateau(L) for L in table.L], table.plateau_err)
    assert np.allclose(table.plateau_trunc_err, 1e-4)  # the synthetic trusted floor
    rise = [law.relaxation_time(L) * np.log(1 / (1 - FRACTION)) for L in table.L]
    _within(table.saturation_time, rise, table.saturation_time_err)
    # without the trusted time the curve that goes wrong late spoils the plateau
    blind = scaling.plateaus(results.drop(columns=["t_trusted"]))
    assert np.all(np.abs(blind.plateau_per_site - [law.plateau(L) for L in blind.L])
                  > SIGMAS * table.plateau_err)


def test_too_few_trusted_times_warns_and_widens_the_error(caplog):
    results = saturating_results((8, 16), DISORDER_TIMES, DISORDER_LAW, stderr=STDERR,
                                 seed=2, trusted_until=2.0)
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        plateau = scaling.plateaus(results)
    assert "only 3 of 101 times" in caplog.text
    assert not plateau.trusted_only.any()
    for row in plateau.itertuples():
        rows = results[(results.L == row.L) & (results.t >= row.window_start)]
        widened = np.hypot(rows.S_obs_err, rows.S_obs_trunc_err) / row.L
        assert row.plateau_err >= np.sqrt(np.mean(widened**2) / len(rows))


def test_nan_or_infinite_trusted_time_means_every_time():
    results = saturating_results((8, 16), DISORDER_TIMES, DISORDER_LAW, stderr=STDERR,
                                 seed=2)
    plain = scaling.plateaus(results)
    for value in (np.nan, np.inf):
        marked = scaling.plateaus(results.assign(t_trusted=value, S_obs_trunc_err=np.nan))
        assert marked.trusted_only.all() and np.isinf(marked.t_trusted).all()
        assert np.array_equal(marked.plateau_per_site, plain.plateau_per_site)


# --------------------------------------------------------------------------- equilibrium


def test_deficit_against_the_equilibrium_value_and_its_extrapolation():
    law = DISORDER_LAW["number@b2"]
    table = scaling.scaling_table(_disordered())
    assert np.allclose(table.eq_per_site, law.s_eq)
    assert np.allclose(table.deficit_eq_per_site, law.s_eq - table.plateau_per_site)
    assert (table.deficit_eq_err >= table.plateau_err).all()
    row = table.iloc[0]
    _within(row.deficit_eq_extrapolated, law.s_eq - law.s_inf, row.deficit_eq_extrapolated_err)
    text = scaling.format_table(table)
    assert "deficit_eq/L" in text and "deficit_eq/L (L->inf)" in text


def test_older_tables_get_nan_equilibrium_and_truncation_columns():
    table = scaling.scaling_table(_results(STDERR))
    for name in ("eq_per_site", "deficit_eq_per_site", "deficit_eq_extrapolated",
                 "plateau_trunc_err", "plateau_disorder_err"):
        assert table[name].isna().all(), name
    assert (table.realizations == 1).all() and table.trusted_only.all()
    assert "deficit_eq" not in scaling.format_table(table)


def test_warnings_name_only_the_parameters_that_vary(caplog):
    slow = {"slow": SaturationLaw(s_inf=0.5, c=0.0, tau0=4.0, z=1.0)}
    results = saturating_results((8, 16), np.arange(0.0, 60.0, 0.5), slow, stderr=0.001,
                                 seed=3, parameters={"delta": [0.5], "h": [0.1, 0.2]})
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        scaling.plateaus(results)
    assert "has not saturated" in caplog.text
    assert "h=0.1" in caplog.text and "delta" not in caplog.text


def test_numbers_are_printed_to_the_precision_of_their_error():
    assert with_error(0.123456, 0.0123) == "0.123 +- 0.012"
    assert with_error(12.3456, 1.7) == "12.3 +- 1.7"
    assert with_error(0.65, 1e-17) == "0.65"  # exact up to rounding


# --------------------------------------------------------------------------- saturation


def _still_rising() -> pd.DataFrame:
    # a number-block curve of relaxation time tau = 4 L still rising at t_max = 60 for
    # L = 16 (tau = 64), far below its equilibrium value; known answer: not saturated
    slow = {"number:b4": SaturationLaw(s_inf=0.69, c=0.0, tau0=4.0, z=1.0, s_eq=0.693)}
    return saturating_results((8, 16), np.arange(0.0, 60.0, 0.5), slow, stderr=0.001,
                              seed=3)


def test_a_rising_curve_is_flagged_and_gets_no_saturation_time(caplog):
    results = _still_rising()
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        table = scaling.scaling_table(results)
    assert (table.plateau_status == scaling.RISING).all()
    assert "has not saturated" in caplog.text and "S_obs_eq/L = 0.693" in caplog.text
    # the true slope of the law at the window centre lies within the reported error
    law = SaturationLaw(s_inf=0.69, c=0.0, tau0=4.0, z=1.0)
    for row in table.itertuples():
        centre = 0.5 * (row.window_start + row.t_last)
        tau = law.relaxation_time(row.L)
        truth = (law.s_inf - law.s_initial) / tau * np.exp(-centre / tau)
        # a straight line through an exponential: its slope is the local slope up to
        # the curvature over the window, (span/tau)^2 / 24 relative (Taylor, fact of
        # the trade), which is below 1 % here; the noise part is within 4 sigma
        curvature = truth * ((row.t_last - row.window_start) / tau) ** 2 / 24
        assert abs(row.window_slope - truth) <= SIGMAS * row.window_slope_err + curvature
    assert table.saturation_time.isna().all() and table.z.isna().all()
    assert scaling.collapse_curves(results, table).empty
    text = scaling.format_table(table)
    assert "rising" in text and "undetermined (0 L)" in text


def test_a_saturated_curve_is_not_flagged(caplog):
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        table = scaling.scaling_table(_results(STDERR))
    assert (table.plateau_status == scaling.SATURATED).all()
    assert "has not saturated" not in caplog.text
    # pure noise around a constant: the slope is zero within 4 errors
    assert np.all(np.abs(table.window_slope) <= SIGMAS * table.window_slope_err)


def test_a_plateau_far_below_the_equilibrium_value_is_flagged(caplog):
    law = {"number@b2": SaturationLaw(s_inf=0.55, c=0.0, tau0=0.5, z=1.0, s_eq=0.62)}
    results = saturating_results((8, 12, 16), DISORDER_TIMES, law, stderr=STDERR, seed=4)
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        table = scaling.scaling_table(results)
    assert (table.plateau_status == scaling.BELOW_EQUILIBRIUM).all()
    assert "or not thermalizing" in caplog.text
    expected = (0.62 - table.plateau_per_site) / np.hypot(table.plateau_total_err,
                                                          table.eq_err)
    assert np.allclose(table.eq_distance_sigmas, expected)
    assert np.isfinite(table.saturation_time).all()  # levelled off: t_f is meaningful


def test_exponent_from_two_lengths_is_undetermined(caplog):
    results = _results(STDERR)
    results = results[results.L.isin([8, 16])]
    with caplog.at_level("WARNING", logger="mpsobs.analysis.scaling"):
        table = scaling.scaling_table(results)
    assert table.z.isna().all() and table.z_err.isna().all()
    assert (table.z_note.str.contains("undetermined: 2 length")).all()
    assert "a power law needs 3" in caplog.text
    assert np.isfinite(table.saturation_time).all()
    assert "undetermined (2 L)" in scaling.format_table(table)


# --------------------------------------------------------------------------- total error


def test_total_error_combines_the_parts_by_the_documented_rule():
    from mpsobs.analysis import uncertainty
    from mpsobs.estimators.estimate import pruned_entropy_bound

    results = _results(STDERR).head(6).copy()
    plain = uncertainty.total_error(results)
    assert np.array_equal(plain, results.S_obs_err)  # older tables keep their error
    results["S_obs_trunc_err"] = [0.03, np.nan, 0.0, 0.01, 0.02, 0.0]
    results["S_obs_method_err"] = 0.04
    results["pruned_mass"] = [0.0, 1e-6, 0.0, 0.0, 1e-3, 0.0]
    total = uncertainty.with_total_error(results)[uncertainty.TOTAL].to_numpy()
    quad = np.sqrt(results.S_obs_err**2 + np.nan_to_num(results.S_obs_trunc_err) ** 2
                   + 0.04**2)
    bound = [pruned_entropy_bound(m, s) for m, s in zip(results.pruned_mass,
                                                        results.S_max, strict=True)]
    assert np.allclose(total, quad + bound, rtol=1e-14)
    # the pruning bound by hand: delta (S_max - ln delta), S_max = L ln 2
    row = results.iloc[4]
    assert bound[4] == pytest.approx(1e-3 * (row.L * np.log(2) + np.log(1e3)), rel=1e-14)


def test_scale_uses_the_total_error():
    results = _results(STDERR)
    table = scaling.scaling_table(results)
    assert np.allclose(table.plateau_total_err, table.plateau_err, rtol=1e-14)
    systematic = results.assign(S_obs_trunc_err=0.002 * results.L,
                                S_obs_method_err=0.001 * results.L)
    wide = scaling.scaling_table(systematic)
    # systematic errors do not average down over the window: sqrt(sum of squares)
    assert np.allclose(wide.plateau_total_err,
                       np.sqrt(table.plateau_err**2 + 0.002**2 + 0.001**2), rtol=1e-12)
    assert np.all(wide.extrapolated_err > table.extrapolated_err)
    assert np.allclose(wide.deficit_err, np.hypot(wide.plateau_total_err, wide.thermo_err))


def test_scale_command_says_where_it_wrote(tmp_path, capsys):
    from mpsobs import cli

    _results(STDERR).to_parquet(tmp_path / "results.parquet")
    assert cli.main(["scale", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    for path in workflow.scale_files(tmp_path):
        assert f"wrote {path}" in out and path.is_file()


def test_scale_of_curves_still_rising_writes_an_empty_collapse(tmp_path):
    _still_rising().to_parquet(tmp_path / "results.parquet")
    table = workflow.scale(tmp_path)
    assert (table.plateau_status == scaling.RISING).all()
    for path in workflow.scale_files(tmp_path):
        assert path.stat().st_size > 0, path

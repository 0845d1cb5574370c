"""Satellite models fitted by `allowance calibrate` when a macro history is given.

The history is simulated from a probit satellite model with known coefficients
(tests/histories.macro_driven_history): each month a live loan is charged off with probability
Phi(-2.4 + 0.12 u(t - 3)). The reference for the fit is statsmodels' binomial GLM run directly on
the monthly counts taken from the simulated frame by hand (Seabold and Perktold 2010); the
calibration must give the same estimates, and the estimate must lie within three standard
errors of the known coefficient.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from allowance.calibrate import calibrate
from allowance.exceptions import AssumptionsError
from tests.histories import macro_driven_history, write_csv

TRUE_BETA, LAG = 0.12, 3
POLICY = {"segments": {"book": {"lgd": 0.6, "satellite": {"link": "probit", "lag_months": {"unemployment_rate": LAG},
                                                           "source": "fitted"}}}}


@pytest.fixture(scope="module")
def simulated(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sat")
    drawn = macro_driven_history(slots=1500, months=48, intercept=-2.4, beta=TRUE_BETA, lag=LAG, seed=7)
    history = write_csv(drawn.frame, folder / "history.csv")
    macro = write_csv(drawn.macro, folder / "macro.csv")
    return drawn, history, macro


@pytest.fixture(scope="module")
def calibration(simulated):
    _, history, macro = simulated
    return calibrate(history, {"lgd_workout_months": 1}, POLICY, macro=macro)


def _counts_by_hand(frame: pd.DataFrame) -> pd.DataFrame:
    """Loans at risk (a row the month before, not charged off) and charge-offs, by month."""
    rows = frame.sort_values(["loan_id", "month"])
    follows = rows["loan_id"].eq(rows["loan_id"].shift())
    at_risk = rows[follows]
    out = at_risk.groupby("month").agg(at_risk=("loan_id", "size"), defaults=("charge_off", "count"))
    return out.reset_index()


def test_the_fit_is_statsmodels_glm_on_the_monthly_counts(simulated, calibration):
    import statsmodels.api as sm

    drawn, _, _ = simulated
    counts = _counts_by_hand(drawn.frame)
    macro = drawn.macro.set_index("month")["unemployment_rate"]
    months = pd.PeriodIndex(counts["month"].str[:7], freq="M")
    x = macro.reindex((months - LAG).astype(str)).to_numpy()
    endog = np.column_stack([counts["defaults"], counts["at_risk"] - counts["defaults"]])
    reference = sm.GLM(endog, sm.add_constant(x), family=sm.families.Binomial(sm.families.links.Probit())).fit()
    fit = calibration.results["satellites"]["book"]
    assert fit.coefficients["coefficient"].to_numpy() == pytest.approx(np.asarray(reference.params), rel=1e-6)
    assert fit.statistic("months_used") == len(counts)


def test_the_known_coefficient_is_recovered(calibration):
    fit = calibration.results["satellites"]["book"]
    row = fit.coefficients.set_index("term").loc["unemployment_rate"]
    assert abs(row["coefficient"] - TRUE_BETA) < 3 * row["std_error"]
    assert row["std_error"] < TRUE_BETA / 3  # the data pin the slope down


def test_the_assumptions_carry_the_estimate(calibration):
    model = calibration.assumptions.data["segments"]["book"]["satellite"]
    fit = calibration.results["satellites"]["book"].coefficients.set_index("term")
    assert model["link"] == "probit" and model["lag_months"] == {"unemployment_rate": LAG}
    assert model["coefficients"]["unemployment_rate"] == float(f"{fit.loc['unemployment_rate', 'coefficient']:.4g}")
    assert "estimated by allowance calibrate" in model["source"]


def test_stated_coefficients_are_kept_with_the_estimate_beside(simulated):
    _, history, macro = simulated
    policy = {"segments": {"book": {"lgd": 0.6, "satellite": {
        "link": "probit", "coefficients": {"unemployment_rate": 0.05}, "lag_months": {"unemployment_rate": LAG}}}}}
    cal = calibrate(history, {"lgd_workout_months": 1}, policy, macro=macro)
    assert cal.assumptions.data["segments"]["book"]["satellite"]["coefficients"] == {"unemployment_rate": 0.05}
    assert any(c.topic == "segments.book.satellite.coefficients" and c.source == "policy" for c in cal.choices)


def test_a_model_without_coefficients_needs_the_macro_history(simulated):
    _, history, _ = simulated
    with pytest.raises(AssumptionsError, match="--macro"):
        calibrate(history, {"lgd_workout_months": 1}, POLICY)


def test_the_evidence_is_written(calibration, tmp_path):
    import json

    import openpyxl

    from allowance.report.calibration import write_calibration

    out = tmp_path / "cal"
    write_calibration(out, calibration)
    models = pd.read_csv(out / "satellite_models.csv")
    row = models[(models["segment"] == "book") & (models["term"] == "unemployment_rate")].iloc[0]
    assert row["std_error"] > 0 and row["lag_months"] == LAG
    assert {"dispersion", "pseudo_r2_mcfadden"} <= set(models["term"])
    assert len(pd.read_csv(out / "satellite_fitted.csv")) == 47  # every month after the first
    assert "Satellite models" in openpyxl.load_workbook(out / "calibration.xlsx", read_only=True).sheetnames
    record = json.loads((out / "calibration.json").read_text())
    assert len(record["macro"]["sha256"]) == 64
    assert "estimated: unemployment_rate" in (out / "assumptions.toml").read_text()


@pytest.mark.slow
def test_calibrate_with_a_macro_history_from_the_command_line(simulated, tmp_path):
    import tomllib

    from typer.testing import CliRunner

    from allowance.cli import app
    from allowance.report.calibration import toml_value

    _, history, macro = simulated
    policy = tmp_path / "policy.toml"
    policy.write_text('[segments.book]\nlgd = 0.6\n\n[segments.book.satellite]\nlink = "probit"\n'
                      f"lag_months = {toml_value({'unemployment_rate': LAG})}\n")
    result = CliRunner().invoke(app, ["calibrate", str(history), "--policy", str(policy), "--macro", str(macro),
                                      "--out", str(tmp_path / "cal")])
    assert result.exit_code == 0, result.output
    written = tomllib.loads((tmp_path / "cal" / "assumptions.toml").read_text())
    beta = written["segments"]["book"]["satellite"]["coefficients"]["unemployment_rate"]
    assert abs(beta - TRUE_BETA) < 0.05
    bad = CliRunner().invoke(app, ["calibrate", str(history), "--policy", str(policy), "--out", str(tmp_path / "x")])
    assert bad.exit_code == 1 and "--macro" in bad.output

"""fit.intervals: split-conformal and conformalised-quantile prediction intervals, checked against
their published finite-sample guarantee in seeded simulations."""
import math

import numpy as np
import pandas as pd
import pytest

import learnopt as lo
from learnopt.core.errors import LearnoptError


def _rows(rng, n):
    # heteroscedastic on purpose: the noise grows with x (invented, seeded)
    x = rng.uniform(0, 10, n)
    return pd.DataFrame({"x": x, "y": 1.0 + 2.0 * x + rng.normal(0, 0.5 + 0.3 * x)})


def test_margin_is_the_published_order_statistic():
    # Lei et al. 2018, sec. 2.2: q = the ceil((n + 1) * level)-th smallest absolute residual
    rng = np.random.default_rng(0)
    fit = lo.regression(_rows(rng, 200), "y").solve()
    cal = _rows(rng, 37)
    iv = fit.intervals(cal, level=0.8)
    scores = np.sort(np.abs(cal["y"] - fit.predict(cal)))
    assert iv.margin == pytest.approx(scores[math.ceil(38 * 0.8) - 1])
    assert iv.guarantee == (0.8, pytest.approx(0.8 + 1 / 38))
    table = iv.predict(cal.head(3))
    assert np.allclose(table["high"] - table["low"], 2 * iv.margin)


def test_split_conformal_coverage_guarantee_over_repetitions():
    # Guarantee (Vovk et al. 2005; Lei et al. 2018, thm 2.2): averaged over data sets, coverage
    # lies in [level, level + 1/(n_cal + 1)]. R = 300 repetitions, n_cal = 40, 200 test rows
    # each: the standard error of the mean coverage is about 0.003, allowed 3.5 of those.
    rng = np.random.default_rng(7)
    level, n_cal, R = 0.9, 40, 300
    cover = []
    for _ in range(R):
        fit = lo.regression(_rows(rng, 60), "y").solve()
        iv = fit.intervals(_rows(rng, n_cal), level=level)
        cover.append(iv.coverage(_rows(rng, 200))["covered"])
    mean = float(np.mean(cover))
    slack = 3.5 * np.std(cover) / np.sqrt(R)
    assert level - slack <= mean <= level + 1 / (n_cal + 1) + slack, mean


@pytest.mark.slow
def test_conformalised_quantile_coverage_and_adaptive_width():
    # Romano et al. 2019, thm 1: the same guarantee for the conformalised quantile band; the band
    # follows the noise, so it is narrower at small x than at large x (the data's noise grows
    # with x), unlike the constant-width residual interval.
    rng = np.random.default_rng(11)
    level, n_cal, R = 0.8, 30, 120
    cover = []
    for _ in range(R):
        fit = lo.regression(_rows(rng, 150), "y", loss=lo.loss.quantile(0.5)).solve()
        iv = fit.intervals(_rows(rng, n_cal), level=level)
        assert iv.method == "quantile"
        cover.append(iv.coverage(_rows(rng, 200))["covered"])
    mean = float(np.mean(cover))
    slack = 3.5 * np.std(cover) / np.sqrt(R)
    assert level - slack <= mean <= level + 1 / (n_cal + 1) + slack, mean
    band = iv.predict(pd.DataFrame({"x": [0.5, 9.5]}))
    width = (band["high"] - band["low"]).to_numpy()
    assert width[0] < 0.6 * width[1]


def test_quantile_band_on_the_engel_data_matches_statsmodels_quantreg():
    # Reference: statsmodels QuantReg on its bundled Engel data; the band fits at 0.05 and 0.95
    # are the task's own quantile fits, which must equal QuantReg's at those levels.
    import statsmodels.api as sm
    d = sm.datasets.engel.load_pandas().data
    rng = np.random.default_rng(3)
    held = rng.random(len(d)) < 0.3
    fit = lo.regression(d[~held], "foodexp", loss=lo.loss.quantile(0.5)).solve()
    iv = fit.intervals(d[held], level=0.9)
    X = sm.add_constant(d[~held]["income"])
    for band, tau in zip(iv.bands, (0.05, 0.95)):
        ref = sm.QuantReg(d[~held]["foodexp"], X).fit(q=tau)
        # the LP optimum can be non-unique; compare the objective (sum of pinball losses)
        u_ref = d[~held]["foodexp"] - ref.predict(X)
        u_ours = d[~held]["foodexp"] - band.predict(d[~held])
        pin = lambda u: float(np.sum(np.maximum(tau * u, (tau - 1) * u)))    # noqa: E731
        assert pin(u_ours) <= pin(u_ref) * (1 + 1e-6)


@pytest.mark.parametrize("call, words", [
    (lambda fit, cal: fit.intervals(cal.head(5), level=0.9), "at least 9"),
    (lambda fit, cal: fit.intervals(cal, level=1.2), "level"),
    (lambda fit, cal: fit.intervals(cal, method="quantil"), "nearest known: 'quantile'"),
    (lambda fit, cal: fit.intervals(cal.drop(columns="y")), "target column 'y'"),
    (lambda fit, cal: fit.intervals(cal.assign(y=np.nan)), "missing or infinite"),
])
def test_mistakes_are_named(call, words):
    rng = np.random.default_rng(1)
    fit = lo.regression(_rows(rng, 80), "y").solve()
    with pytest.raises(LearnoptError) as err:
        call(fit, _rows(rng, 40))
    assert words in str(err.value)


def test_classification_fits_are_refused():
    rng = np.random.default_rng(2)
    frame = _rows(rng, 80).assign(label=lambda f: np.where(f["y"] > 10, "hi", "lo"))
    fit = lo.classification(frame, "label", features=["x"]).solve()
    with pytest.raises(LearnoptError, match="regression"):
        fit.intervals(frame)

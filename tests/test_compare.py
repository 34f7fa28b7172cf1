"""smle.compare and `smle compare`: fitting several models to the same data, nested pairs and
their likelihood-ratio tests (Wilks 1938, Annals of Mathematical Statistics 9; the boundary
mixture of Self and Liang 1987, J. American Statistical Association 82), checked against
SciPy's chi-square law and by the size of the test on simulated data."""

import json
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import smle
from smle.cli import app as cli
from smle.decision.compare import (
    ModelSpec, _lr_test, mixture_critical_value, mixture_p_value, nested_tests, restrictions,
)
from smle.errors import SmleInputError

BASE = dict(mu=0.03, ar1=0.0, omega=0.05, alpha=0.06, beta=0.90)


def spec(name, options=None, fixed=None):
    return ModelSpec.of({"model": name, "options": options or {}, "fixed": fixed or {}})


def test_nested_pairs_are_detected():
    garch, garch_ar0 = spec("garch"), spec("garch", fixed={"ar1": 0.0})
    assert restrictions(garch_ar0, garch) == {"ar1": 0.0}
    assert restrictions(garch, garch_ar0) is None and restrictions(garch, garch) is None
    # GARCH-NIG is garch-mix (ig link) at rho = 0 (Forsberg and Bollerslev 2002)
    nig, mix = spec("garch", {"innovations": "nig"}), spec("garch-mix")
    assert restrictions(nig, mix) == {"rho": 0.0}
    assert restrictions(spec("garch", {"innovations": "nig"}, {"ar1": 0.0}), mix) == {"ar1": 0.0, "rho": 0.0}
    assert restrictions(spec("garch", {"innovations": "nig", "variance_start": "sample"}), mix) is None
    assert restrictions(nig, spec("garch-mix", {"link": "lognormal"})) is None
    assert restrictions(nig, spec("garch-mix", fixed={"rho": 0.0})) is None  # the same model: nothing to test
    # held at different values: not nested
    assert restrictions(spec("garch", fixed={"ar1": 0.0}), spec("garch", fixed={"ar1": 0.1})) is None
    # normal innovations are t's limit nu -> infinity: named in the notes, not tested
    fake = [SimpleNamespace(loglik=-10.0, nse=0.0)] * 2
    tests, notes = nested_tests([spec("garch"), spec("garch", {"innovations": "t"})], fake, 0.05)
    assert tests == [] and len(notes) == 1 and "nu -> infinity" in notes[0] and "not tested" in notes[0]


def test_mixture_law_against_scipy():
    # 0.5 chi2(0) + 0.5 chi2(1): P(X >= c) = 0.5 P(chi2(1) >= c) for c > 0; its 5% critical value
    # is the 10% point of chi2(1), 2.7055 (Self and Liang 1987, case 5)
    for c in (0.1, 1.0, 2.7055, 6.0):
        assert mixture_p_value(c, 1) == pytest.approx(0.5 * stats.chi2.sf(c, 1), rel=1e-12)
        assert mixture_p_value(c, 2) == pytest.approx(0.5 * stats.chi2.sf(c, 1) + 0.5 * stats.chi2.sf(c, 2))
    assert mixture_p_value(0.0, 1) == pytest.approx(1.0)
    assert mixture_critical_value(0.05, 1) == pytest.approx(stats.chi2.ppf(0.90, 1), rel=1e-8)


def test_boundary_restriction_uses_the_mixture_and_simulation_error_warns():
    big = smle.get_model("garch-mix")
    small_fit, big_fit = SimpleNamespace(loglik=-100.0, nse=0.0), SimpleNamespace(loglik=-98.0, nse=0.0)
    interior = _lr_test(0, 1, {"rho": 0.0}, big, small_fit, big_fit, 0.05)
    assert interior.statistic == 4.0 and interior.p_value == pytest.approx(stats.chi2.sf(4.0, 1))
    assert interior.reference.startswith("chi-square") and interior.warning == ""
    # a restriction at the edge of the region (here omega's lower bound 0) takes the mixture
    edge = _lr_test(0, 1, {"omega": 0.0}, big, small_fit, big_fit, 0.05)
    assert edge.p_value == pytest.approx(0.5 * stats.chi2.sf(4.0, 1)) and "Self and Liang (1987)" in edge.reference
    # LR = 4.0 against 3.84 with simulation sd 2 sqrt(0.3^2 + 0.3^2) = 0.85: the conclusion could flip
    noisy = _lr_test(0, 1, {"rho": 0.0}, big, SimpleNamespace(loglik=-100.0, nse=0.3),
                     SimpleNamespace(loglik=-98.0, nse=0.3), 0.05)
    assert noisy.simulation_sd == pytest.approx(2 * np.hypot(0.3, 0.3)) and "more draws" in noisy.warning
    far = _lr_test(0, 1, {"rho": 0.0}, big, SimpleNamespace(loglik=-100.0, nse=0.3),
                   SimpleNamespace(loglik=-80.0, nse=0.3), 0.05)
    assert far.warning == ""


def test_likelihood_ratio_test_size_for_ar1_zero():
    # Under ar1 = 0 the LR test of garch with ar1 held at 0 against garch has size 5%. 60 seeded
    # replications of T = 300, closed forms only: the number of rejections is Binomial(60, 0.05)
    # (mean 3) when the chi-square law holds; P(X >= 10) = 0.0008, so at most 9 are accepted.
    # The 60 p-values are also tested for uniformity (Kolmogorov-Smirnov, p > 0.001).
    model = smle.get_model("garch")
    p_values = []
    for rep in range(60):
        y, _ = smle.simulate(model, BASE, 300, seed=1000 + rep)
        comparison = smle.compare([{"model": "garch", "fixed": {"ar1": 0.0}}, "garch"], y)
        (test,) = comparison.tests
        assert (test.restricted, test.general, test.df) == (1, 2, 1)
        p_values.append(test.p_value)
    p_values = np.array(p_values)
    assert np.sum(p_values < 0.05) <= 9
    assert stats.kstest(p_values, "uniform").pvalue > 0.001


def test_compare_table_json_and_figure(tmp_path):
    y, _ = smle.simulate(smle.get_model("garch", innovations="t"), {**BASE, "nu": 5.0}, 300, seed=7)
    comparison = smle.compare(["garch", {"model": "garch", "options": {"innovations": "t"}, "label": "t-GARCH"},
                               {"model": "garch", "fixed": {"ar1": 0.0}}], y)
    rows = comparison.rows()
    assert [r["free_parameters"] for r in rows] == [5, 6, 4]
    for r, f in zip(rows, comparison.fits):
        assert r["loglik_error"] == 0.0 and r["aic"] == pytest.approx(-2 * f.loglik + 2 * r["free_parameters"])
        assert r["bic"] == pytest.approx(-2 * f.loglik + r["free_parameters"] * np.log(300))
    text = comparison.summary()
    assert "t-GARCH" in text and "3 in 1" in text and "not investment advice" in text and "nu -> infinity" in text
    stored = json.loads(comparison.to_json(tmp_path / "c.json"))
    assert stored["tests"][0]["restrictions"] == "ar1=0" and stored["models"][1]["label"] == "t-GARCH"
    comparison.figure(tmp_path / "c.png")
    assert (tmp_path / "c.png").stat().st_size > 10_000


def test_bad_input():
    y = np.random.default_rng(0).normal(size=300)
    with pytest.raises(SmleInputError, match="at least two"):
        smle.compare(["garch"], y)
    with pytest.raises(SmleInputError, match="unknown key"):
        smle.compare(["garch", {"model": "garch", "fix": {"ar1": 0}}], y)
    with pytest.raises(SmleInputError, match="different numbers of observed series"):
        smle.compare(["garch", "realized-sv"], y)
    with pytest.raises(SmleInputError, match="level"):
        smle.compare(["garch", "sv"], y, level=0.7)


def test_command_line(tmp_path, capsys):
    y, _ = smle.simulate(smle.get_model("garch"), BASE, 300, seed=8)
    path = tmp_path / "r.csv"
    pd.DataFrame({"ret": y}).to_csv(path, index=False)
    report = tmp_path / "cmp"
    code = cli.main(["compare", str(path), "--model", "garch", "--model", "garch:innovations=t",
                     "--model", "garch:ar1=0", "--report", str(report)])
    out = capsys.readouterr().out
    assert code == 0 and "smle compare -- 300 periods, 3 models" in out and "3 in 1" in out
    assert {p.name for p in report.iterdir()} == {"compare.txt", "compare.json", "compare.png"}
    # --fix holds a parameter in every model that has it; the same numbers as the library
    assert cli.main(["compare", str(path), "--model", "garch", "--model", "garch:innovations=t", "--fix", "ar1=0"]) == 0
    direct = smle.fit("garch", y, fixed={"ar1": 0.0})
    assert f"{direct.loglik:.3f}" in capsys.readouterr().out
    assert cli.main(["compare", str(path), "--model", "garch:ar1=zero", "--model", "garch"]) == 2
    assert "not a number" in capsys.readouterr().err

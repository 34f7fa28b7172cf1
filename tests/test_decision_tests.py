"""Coverage tests of hit sequences (Kupiec 1995; Christoffersen 1998) and the Diebold-Mariano
(1995) test with a Newey-West long-run variance (smle.decision)."""

import math

import numpy as np
import pytest
from scipy import stats
from scipy.signal import lfilter

from smle.decision import (
    christoffersen_conditional_coverage,
    christoffersen_independence,
    diebold_mariano,
    kupiec_unconditional_coverage,
)
from smle.errors import SmleInputError

N_REPLICATIONS = 2000
# 4 binomial standard errors of a rejection rate at 5% over 2000 replications: 4 * 0.00487
RATE_TOLERANCE = 4 * math.sqrt(0.05 * 0.95 / N_REPLICATIONS)


def hand_sequence(n, positions):
    hits = np.zeros(n, dtype=int)
    hits[list(positions)] = 1
    return hits


# hand-made sequences: isolated hits, a cluster, hits at both ends, none, all
SEQUENCES = {
    "isolated": hand_sequence(120, [7, 40, 77, 101]),
    "cluster": hand_sequence(120, [30, 31, 32, 33, 90]),
    "ends": hand_sequence(60, [0, 25, 59]),
    "last only": hand_sequence(40, [39]),
    "none": hand_sequence(80, []),
    "all": np.ones(25, dtype=int),
}


def log_lik(n_zero, n_one, q):
    """log[(1 - q)^n_zero q^n_one], with 0^0 = 1 (the likelihood's limit)."""
    out = 0.0
    if n_zero:
        out += n_zero * math.log(1 - q)
    if n_one:
        out += n_one * math.log(q)
    return out


def published_statistics(hits, p):
    """LR_uc (Kupiec 1995, eq. for the proportion of failures), LR_ind and LR_cc (Christoffersen
    1998, section 3), written out from the papers with Python counts."""
    hits = [int(v) for v in hits]
    n, x = len(hits), sum(hits)
    lr_uc = -2 * (log_lik(n - x, x, p) - log_lik(n - x, x, x / n))
    counts = {(i, j): 0 for i in (0, 1) for j in (0, 1)}
    for previous, current in zip(hits[:-1], hits[1:]):
        counts[previous, current] += 1
    n00, n01, n10, n11 = counts[0, 0], counts[0, 1], counts[1, 0], counts[1, 1]
    pi01 = n01 / (n00 + n01) if n00 + n01 else 0.0
    pi11 = n11 / (n10 + n11) if n10 + n11 else 0.0
    pi = (n01 + n11) / (n00 + n01 + n10 + n11)
    markov = log_lik(n00, n01, pi01) + log_lik(n10, n11, pi11)
    lr_ind = -2 * (log_lik(n00 + n10, n01 + n11, pi) - markov)
    lr_cc = -2 * (log_lik(n00 + n10, n01 + n11, p) - markov)
    return lr_uc, lr_ind, lr_cc


@pytest.mark.parametrize("name", sorted(SEQUENCES))
@pytest.mark.parametrize("p", [0.01, 0.05])
def test_statistics_equal_the_published_formulas(name, p):
    hits = SEQUENCES[name]
    lr_uc, lr_ind, lr_cc = published_statistics(hits, p)
    uc = kupiec_unconditional_coverage(hits, p)
    ind = christoffersen_independence(hits.astype(bool))  # booleans accepted
    cc = christoffersen_conditional_coverage(list(hits), p)
    assert uc.statistic == pytest.approx(max(lr_uc, 0.0), abs=1e-10)
    assert uc.p_value == pytest.approx(stats.chi2(1).sf(max(lr_uc, 0.0)), abs=1e-12)
    assert ind.statistic == pytest.approx(max(lr_ind, 0.0), abs=1e-10)
    assert ind.p_value == pytest.approx(stats.chi2(1).sf(max(lr_ind, 0.0)), abs=1e-12)
    assert cc.statistic == pytest.approx(lr_cc, abs=1e-10)
    assert cc.p_value == pytest.approx(stats.chi2(2).sf(lr_cc), abs=1e-12)
    assert cc.statistic == pytest.approx(cc.unconditional + cc.independence, abs=1e-12)
    assert np.isfinite([uc.statistic, ind.statistic, cc.statistic]).all()
    assert ind.n00 + ind.n01 + ind.n10 + ind.n11 == hits.size - 1


def test_edge_cases_and_pieces():
    none = christoffersen_independence(SEQUENCES["none"])
    assert none.statistic == 0.0 and none.p_value == 1.0 and math.isnan(none.pi11)
    last = christoffersen_independence(SEQUENCES["last only"])  # no transition out of a hit
    assert (last.n10, last.n11) == (0, 0) and math.isnan(last.pi11) and last.statistic == 0.0
    everything = christoffersen_independence(SEQUENCES["all"])
    assert everything.statistic == 0.0 and everything.pi11 == 1.0 and math.isnan(everything.pi01)
    uc = kupiec_unconditional_coverage(SEQUENCES["none"], 0.05)
    assert uc.n_hits == 0 and uc.statistic == pytest.approx(-2 * 80 * math.log(0.95))
    cluster = christoffersen_independence(SEQUENCES["cluster"])
    assert (cluster.n00, cluster.n01, cluster.n10, cluster.n11) == (112, 2, 2, 3)  # 119 transitions
    assert cluster.pi11 == pytest.approx(0.6) and cluster.p_value < 0.001


def test_kupiec_rejection_rate_equals_its_exact_size():
    # Under i.i.d. Bernoulli(p) hits the number of hits is Binomial(T, p), so the test's exact
    # rejection probability at the 5% level is a binomial sum (the chi2(1) approximation plus
    # discreteness make it 0.0514 at T = 1000, p = 0.05; the simulated rate measured 0.051). The simulated rate must match it within
    # 4 binomial standard errors, and it must be near nominal (within 0.02).
    n, p = 1000, 0.05
    counts = np.arange(n + 1)
    rejects = np.array([kupiec_unconditional_coverage(hand_sequence(n, range(k)), p).p_value < 0.05 for k in counts])
    exact = float(np.sum(stats.binom(n, p).pmf(counts)[rejects]))
    assert abs(exact - 0.05) < 0.02
    rng = np.random.default_rng(1995)
    hits = rng.uniform(size=(N_REPLICATIONS, n)) < p
    rate = np.mean([kupiec_unconditional_coverage(h, p).p_value < 0.05 for h in hits])
    assert abs(rate - exact) < 4 * math.sqrt(exact * (1 - exact) / N_REPLICATIONS), (rate, exact)


def test_christoffersen_tests_reject_at_about_the_nominal_rate():
    # i.i.d. Bernoulli(0.05) hits, T = 2000, 2000 seeded replications. The chi2 approximation of
    # LR_ind is coarse with few consecutive hits (expected n11 = 5 here): its rejection rate was
    # measured between 1.5% (T = 250) and 8.3% (T = 1000) at smaller T; at T = 2000 it measured
    # 4.8% (independence) and 4.75% (conditional coverage). Tolerance: 4 binomial SEs (0.0195).
    rng = np.random.default_rng(1998)
    hits = (rng.uniform(size=(N_REPLICATIONS, 2000)) < 0.05).astype(int)
    independence = np.mean([christoffersen_independence(h).p_value < 0.05 for h in hits])
    conditional = np.mean([christoffersen_conditional_coverage(h, 0.05).p_value < 0.05 for h in hits])
    assert abs(independence - 0.05) < RATE_TOLERANCE, independence
    assert abs(conditional - 0.05) < RATE_TOLERANCE, conditional


def test_christoffersen_tests_detect_clustered_hits():
    # hits from a Markov chain with P(hit | no hit) = 0.04, P(hit | hit) = 0.3 (clusters), T = 1000:
    # the independence test must reject in most replications (measured: all 200)
    rng = np.random.default_rng(7)
    pi01, pi11 = 0.04, 0.3
    stationary = pi01 / (1 - pi11 + pi01)
    rejections = []
    for _ in range(200):
        hits = np.zeros(1000, dtype=int)
        hits[0] = rng.uniform() < stationary
        u = rng.uniform(size=1000)
        for t in range(1, 1000):
            hits[t] = u[t] < (pi11 if hits[t - 1] else pi01)
        rejections.append(christoffersen_independence(hits).p_value < 0.05)
    assert np.mean(rejections) > 0.9


def diebold_mariano_by_hand(a, b, lags, hln=False, horizon=1):
    """DM from Diebold and Mariano (1995, eq. 9 with the Bartlett window of Newey and West 1987)."""
    d = [x - y for x, y in zip(a, b)]
    n = len(d)
    mean = sum(d) / n
    gamma = [sum((d[t] - mean) * (d[t - k] - mean) for t in range(k, n)) / n for k in range(lags + 1)]
    lrv = gamma[0] + 2 * sum((1 - k / (lags + 1)) * gamma[k] for k in range(1, lags + 1))
    statistic = mean / math.sqrt(lrv / n)
    if hln:  # Harvey, Leybourne and Newbold (1997, eq. 9), Student t with n - 1 df
        statistic *= math.sqrt((n + 1 - 2 * horizon + horizon * (horizon - 1) / n) / n)
        return statistic, 2 * stats.t(n - 1).sf(abs(statistic))
    return statistic, 2 * stats.norm.sf(abs(statistic))


def test_diebold_mariano_equals_the_published_formula():
    rng = np.random.default_rng(13)
    y = lfilter([1.0], [1.0, -0.4], rng.standard_t(5, size=150))
    a = stats.norm(0.1, 1.2).logpdf(y)
    b = stats.t(4, scale=1.1).logpdf(y)
    for lags in (0, 3, 9):
        test = diebold_mariano(a, b, lags=lags)
        statistic, p_value = diebold_mariano_by_hand(a, b, lags)
        assert test.statistic == pytest.approx(statistic, rel=1e-12)
        assert test.p_value == pytest.approx(p_value, rel=1e-10)
        # the long-run variance against statsmodels' HAC standard error of a mean
        sm = pytest.importorskip("statsmodels.api")
        fit = sm.OLS(a - b, np.ones(a.size)).fit(cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": False})
        assert math.sqrt(test.long_run_variance / a.size) == pytest.approx(float(fit.bse[0]), rel=1e-10)
    corrected = diebold_mariano(a, b, lags=4, small_sample=True, horizon=2)
    statistic, p_value = diebold_mariano_by_hand(a, b, 4, hln=True, horizon=2)
    assert corrected.statistic == pytest.approx(statistic, rel=1e-12)
    assert corrected.p_value == pytest.approx(p_value, rel=1e-10)
    # default lags: floor(4 (T/100)^(2/9)) = 4 at T = 150; one-sided p-values
    default = diebold_mariano(a, b)
    assert default.lags == 4
    greater = diebold_mariano(a, b, alternative="greater")
    less = diebold_mariano(a, b, alternative="less")
    assert greater.p_value + less.p_value == pytest.approx(1.0)
    assert greater.p_value == pytest.approx(stats.norm.sf(default.statistic))


def test_diebold_mariano_size_under_equal_accuracy():
    # Two forecasts N(+0.3, 1) and N(-0.3, 1) of a stationary Gaussian AR(1) with unit variance
    # have equal expected log score by symmetry; the differential d_t = 0.6 y_t is autocorrelated
    # (phi = 0.2), T = 500, 2000 seeded replications. Measured rejection rates at 5%: 6.2% with
    # the default Newey-West lags (5; the Bartlett window's downward bias in the long-run
    # variance), 6.1% with the HLN correction, 11.0% with lags = 0 (ignoring the autocorrelation:
    # true LRV / gamma_0 = 1.5). Tolerance: 4 binomial SEs (0.0195) around 5%.
    rng = np.random.default_rng(1995)
    phi, n = 0.2, 500
    y = lfilter([math.sqrt(1 - phi**2)], [1.0, -phi], rng.normal(size=(N_REPLICATIONS, n + 100)), axis=1)[:, 100:]
    a, b = -0.5 * (y - 0.3) ** 2, -0.5 * (y + 0.3) ** 2
    rate = np.mean([diebold_mariano(x, z).p_value < 0.05 for x, z in zip(a, b)])
    corrected = np.mean([diebold_mariano(x, z, small_sample=True).p_value < 0.05 for x, z in zip(a, b)])
    no_hac = np.mean([diebold_mariano(x, z, lags=0).p_value < 0.05 for x, z in zip(a, b)])
    assert abs(rate - 0.05) < RATE_TOLERANCE, rate
    assert abs(corrected - 0.05) < RATE_TOLERANCE, corrected
    assert no_hac > rate + 0.02, (no_hac, rate)


def test_bad_input():
    with pytest.raises(SmleInputError, match="values other than 0 and 1.*index 2, value 2.0"):
        kupiec_unconditional_coverage([0, 1, 2], 0.05)
    with pytest.raises(SmleInputError, match="expected_rate = 1.5"):
        kupiec_unconditional_coverage([0, 1, 0], 1.5)
    with pytest.raises(SmleInputError, match=r"hits has shape \(1,\).*length >= 2"):
        christoffersen_independence([1])
    with pytest.raises(SmleInputError, match=r"hits has shape \(2, 2\)"):
        christoffersen_conditional_coverage(np.zeros((2, 2)), 0.05)
    a = np.linspace(0, 1, 30)
    with pytest.raises(SmleInputError, match="score_a has 30 periods but score_b has 29"):
        diebold_mariano(a, a[1:])
    with pytest.raises(SmleInputError, match="constant"):
        diebold_mariano(a, a - 1.0)
    with pytest.raises(SmleInputError, match="score_b is not finite.*index 3"):
        diebold_mariano(a, np.where(np.arange(30) == 3, np.nan, a))
    with pytest.raises(SmleInputError, match="lags = 30"):
        diebold_mariano(a, a**2, lags=30)
    with pytest.raises(SmleInputError, match="lags = -1"):
        diebold_mariano(a, a**2, lags=-1)
    with pytest.raises(SmleInputError, match="alternative = 'bigger'"):
        diebold_mariano(a, a**2, alternative="bigger")
    with pytest.raises(SmleInputError, match="horizon = 0"):
        diebold_mariano(a, a**2, small_sample=True, horizon=0)

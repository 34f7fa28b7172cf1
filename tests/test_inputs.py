"""Bad input gets a clear error that names the argument, the value and what is accepted."""

import re

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

import smle
from smle import SmleInputError

SV = dict(mu=-1.0, phi=0.95, sigma_eta=0.2)


@pytest.fixture(scope="module")
def returns():
    y, _ = smle.simulate("sv", SV, 40, seed=0)
    return y


def test_non_finite_observations_are_named_by_row(returns):
    y = returns.copy()
    y[[3, 17]] = [np.nan, np.inf]
    with pytest.raises(SmleInputError, match=r"non-finite .* row\(s\) 3, 17"):
        smle.loglik("sv", SV, y, n_draws=4)


def test_too_short_a_series(returns):
    with pytest.raises(SmleInputError, match=r"y has 5 periods; model 'sv' needs at least 10"):
        smle.loglik("sv", SV, returns[:5], n_draws=4)


def test_wrong_dimensions(returns):
    with pytest.raises(SmleInputError, match=r"shape \(20, 2\); model 'sv' expects shape \(T,\)"):
        smle.loglik("sv", SV, returns.reshape(20, 2), n_draws=4)


def test_non_numeric_observations():
    with pytest.raises(SmleInputError, match="y must be numeric"):
        smle.loglik("sv", SV, ["a"] * 20, n_draws=4)


@pytest.mark.parametrize(
    "name, value, region",
    [
        ("phi", 1.0, "-1 < phi < 1"),
        ("phi", -1.5, "-1 < phi < 1"),
        ("sigma_eta", 0.0, "sigma_eta > 0"),
        ("sigma_eta", -0.1, "sigma_eta > 0"),
        ("mu", float("nan"), "mu any finite number"),
    ],
)
def test_parameters_outside_their_region(returns, name, value, region):
    with pytest.raises(SmleInputError, match=rf"params\['{name}'\] = .* {region}"):
        smle.loglik("sv", {**SV, name: value}, returns, n_draws=4)


def test_missing_and_unknown_parameter_names(returns):
    with pytest.raises(SmleInputError, match="missing sigma_eta"):
        smle.loglik("sv", dict(mu=0.0, phi=0.5), returns, n_draws=4)
    with pytest.raises(SmleInputError, match="does not know: rho"):
        smle.loglik("sv", {**SV, "rho": 0.1}, returns, n_draws=4)


@pytest.mark.parametrize("n_draws, message", [(2, ">= 4"), (7, "must be even"), (8.0, ">= 4"), (True, ">= 4")])
def test_bad_number_of_draws(returns, n_draws, message):
    with pytest.raises(SmleInputError, match=rf"n_draws = .*{message}"):
        smle.loglik("sv", SV, returns, n_draws=n_draws)


def test_odd_draws_are_fine_without_antithetic_pairs(returns):
    assert np.isfinite(smle.loglik("sv", SV, returns, n_draws=5, antithetic=False).value)


def test_bad_settings_and_seed(returns):
    with pytest.raises(SmleInputError, match="tol = -1"):
        smle.loglik("sv", SV, returns, n_draws=4, tol=-1)
    with pytest.raises(SmleInputError, match="max_iter = 0"):
        smle.loglik("sv", SV, returns, n_draws=4, max_iter=0)
    with pytest.raises(SmleInputError, match="seed = -3"):
        smle.loglik("sv", SV, returns, n_draws=4, seed=-3)


def test_unknown_model_lists_the_registry(returns):
    with pytest.raises(SmleInputError, match=r"model = 'egarch' is not a registered model; available: .*sv"):
        smle.loglik("egarch", SV, returns)


def test_grid_filter_refuses_a_random_walk_state():
    y = np.cumsum(np.ones(30))
    with pytest.raises(SmleInputError, match="stationary latent state"):
        smle.reference.grid_loglik("local-level", dict(sigma_eta=1.0, sigma_eps=1.0), y)


# admissible sv points with some exact zero returns; the same examples on every run: CI must not be flaky
admissible_sv_points = given(phi=st.floats(-0.999, 0.999), sigma_eta=st.floats(0.01, 3.0), mu=st.floats(-12.0, 5.0),
                             zeros=st.integers(0, 40))
same_examples = settings(max_examples=25, deadline=None, derandomize=True)


@same_examples
@admissible_sv_points
def test_admissible_parameters_never_give_a_nan(returns, phi, sigma_eta, mu, zeros):
    # any admissible point, with some exact zero returns, yields a finite estimate and NSE
    y = returns.copy()
    y[:zeros] = 0.0
    result = smle.loglik("sv", dict(mu=mu, phi=phi, sigma_eta=sigma_eta), y, n_draws=4, method="eis")
    assert np.isfinite(result.value) and np.isfinite(result.nse)


@same_examples
@admissible_sv_points
def test_admissible_parameters_give_an_exact_value_or_say_the_accuracy_reached(returns, phi, sigma_eta, mu, zeros):
    # the exact method at any admissible point: a finite value with an error bound within its
    # tolerance, or a clear refusal that gives the accuracy the largest grid reached
    y = returns.copy()
    y[:zeros] = 0.0
    try:
        result = smle.loglik("sv", dict(mu=mu, phi=phi, sigma_eta=sigma_eta), y)
    except SmleInputError as error:
        assert "the exact grid reached an accuracy of" in str(error)
    else:
        assert np.isfinite(result.value) and result.error_bound <= 1e-6


def test_joint_constraints_are_checked_everywhere(returns):
    # GARCH covariance stationarity alpha + beta < 1 (Bollerslev 1986) is a joint constraint
    model = smle.get_model("garch-mix")
    params = {**model.start_params(returns), "alpha": 0.5, "beta": 0.6}
    for call in (lambda: smle.loglik(model, params, returns, n_draws=4),
                 lambda: smle.simulate(model, params, 50),
                 lambda: smle.fit(model, returns, start=params)):
        with pytest.raises(SmleInputError, match=r"alpha'\] \+ params\['beta'\] = 0.5 \+ 0.6 .* alpha \+ beta < 1"):
            call()


# -- issue 18, bad input: seeds, sizes beyond memory, damaged result files, complex or text y, prices --

def _entry_points(y, seed=0):
    """The public entry points that take observations and a seed, as calls (smallest settings)."""
    return {
        "loglik": lambda: smle.loglik("sv", SV, y, n_draws=4, seed=seed),
        "fit": lambda: smle.fit("sv", y, n_draws=4, seed=seed, max_steps=1),
        "filter_factor": lambda: smle.filter_factor("sv", SV, y, n_particles=100, seed=seed),
        "check": lambda: smle.check("sv", SV, y, n_draws=4, seed=seed, draws_grid=None),
    }


@pytest.mark.parametrize("seed", [2**70, 2**63, -1, 1.5, "3", np.int64(-2)])
def test_a_seed_outside_0_to_2_63_is_refused_everywhere(returns, seed):
    calls = {**_entry_points(returns, seed), "simulate": lambda: smle.simulate("sv", SV, 20, seed=seed)}
    for name, call in calls.items():
        with pytest.raises(SmleInputError, match=r"seed = .* is not accepted; accepted: an integer from 0 to "
                                                 r"2\*\*63 - 1 = 9223372036854775807"):
            call()


def test_the_largest_seed_is_accepted_and_the_seeds_of_several_runs_must_fit(returns):
    assert np.isfinite(smle.loglik("sv", SV, returns, n_draws=4, seed=2**63 - 1).value)
    with pytest.raises(SmleInputError, match=r"seeds 9223372036854775806 to 9223372036854775806 \+ 2 are used"):
        smle.fit("sv", returns, n_draws=4, seed=2**63 - 2, n_seeds=3)
    with pytest.raises(SmleInputError, match=r"accepted: an integer from 0 to 9223372036854775805"):
        smle.check("sv", SV, returns, n_draws=4, n_seeds=3, seed=2**63 - 2, draws_grid=None)


@pytest.fixture
def no_engine(monkeypatch):
    """Fail at once, instead of allocating, if a run gets past its input checks to the engine."""
    import importlib

    health, fit, likelihood = (importlib.import_module(f"smle.{name}") for name in ("diagnostics.health", "fit",
                                                                                    "likelihood"))

    def reached(*args, **kwargs):
        raise AssertionError("the run reached the engine: its size was not refused")

    filtering = importlib.import_module("smle.diagnostics.filtering")
    for module, name in ((likelihood, "eis_entry"), (likelihood, "compiled_particle_eis"), (likelihood, "_simulate_jit"),
                         (fit, "_fit_one"),
                         (health, "_seed_run"), (filtering, "compiled_filter")):
        monkeypatch.setattr(module, name, reached)


def test_sizes_beyond_the_machine_are_refused_before_allocating(returns, no_engine):
    # 2**31 draws need terabytes (about 40 bytes per period and path, times two draw sets), so no
    # machine runs them; before the check these hung or died in the runtime's allocator.
    for call in (lambda: smle.loglik("sv", SV, returns, n_draws=2**31),
                 lambda: smle.fit("sv", returns, n_draws=2**31),
                 lambda: smle.check("sv", SV, returns, n_draws=2**31, draws_grid=None)):
        with pytest.raises(SmleInputError, match=r"n_draws = 2147483648 is too large: .* needs about .* GiB of memory "
                                                 r"and .* is available"):
            call()
    with pytest.raises(SmleInputError, match=r"n_periods = 100000000000 is too large: simulate .* GiB"):
        smle.simulate("sv", SV, 10**11)
    long = np.tile(returns, 25_000)  # T = 10**6 periods: 10**4 draws of it need about 745 GiB
    with pytest.raises(SmleInputError, match=r"T = 1000000 periods x \(10000 fitting \+ 10000 scoring draws\)"):
        smle.loglik("sv", SV, long, n_draws=10**4, n_score_draws=None)  # a scoring set of n_draws too


def test_particles_and_study_designs_beyond_the_machine_are_refused(returns, no_engine):
    from smle.study.spec import Design, Estimator, check_design

    with pytest.raises(SmleInputError, match=r"n_particles = 100000000000 is too large: filter with 100000000000 "
                                             r"particles needs about .* GiB"):
        smle.filter_factor("sv", SV, returns, n_particles=10**11)
    with pytest.raises(SmleInputError, match=r"design 'huge': n_draws = 1000000000 is too large: fit with T = 2000"):
        check_design(Design("huge", "sv", SV, 2000, 1, Estimator(n_draws=10**9)))


@pytest.mark.parametrize("n_draws, needed", [(10**4, "30.5 MiB"), (10**7, "29.8 GiB")])
def test_the_memory_estimate_against_a_fixed_cap(returns, monkeypatch, no_engine, n_draws, needed):
    from smle import validation

    monkeypatch.setattr(validation, "available_memory", lambda: (2**20, "a cap set by this test"))
    # 40 bytes x T = 40 x (n_draws fitting + n_draws scoring paths): 10**4 draws need 3.2e7 bytes
    with pytest.raises(SmleInputError, match=rf"needs about {needed} of memory and 1 MiB is available "
                                             r"\(a cap set by this test\)"):
        smle.loglik("sv", SV, returns, n_draws=n_draws, n_score_draws=None)
    with pytest.raises(AssertionError, match="reached the engine"):  # a small run goes on to the engine
        smle.loglik("sv", SV, returns, n_draws=4, method="eis")


def test_available_memory_falls_back_to_a_fixed_cap(monkeypatch):
    from smle import validation

    available, source = validation.available_memory()
    assert available > 0 and source
    monkeypatch.setattr(validation, "open", lambda *a, **k: (_ for _ in ()).throw(OSError("none")), raising=False)
    monkeypatch.setattr(validation.os, "sysconf", lambda name: (_ for _ in ()).throw(ValueError(name)))
    assert validation.available_memory() == (validation.FALLBACK_MEMORY, "a fixed cap (the system does not report "
                                                                         "its free memory)")


@pytest.mark.parametrize("content, message", [
    ('{"format": "smle.fit/1", "model": "sv", "param_names": ["mu", ', r"is not complete JSON \(.* line 1 column"),
    ("hello, not JSON\n", "is not complete JSON"),
    ("", "is not complete JSON"),
    ('{"format": "other/2", "rows": []}', r"is not a fit result .*: not an smle fit result"),
    ("[1, 2, 3]", "it holds a JSON list, not an object"),
    ('{"format": "smle.fit/1", "model": "sv"}', "the entry 'covariance' is missing"),
    (bytes(range(256)), r"is not text \(binary content\)"),
])
def test_a_damaged_or_foreign_result_file_is_named(tmp_path, content, message):
    path = tmp_path / "result.json"
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    with pytest.raises(SmleInputError, match=rf"file '{re.escape(str(path))}' .*{message}"):
        smle.FitResult.from_json(path)


def test_a_missing_result_file_or_a_folder_is_named(tmp_path):
    with pytest.raises(SmleInputError, match=rf"file '{tmp_path / 'none.json'}' does not exist; accepted: a fit result"):
        smle.FitResult.from_json(tmp_path / "none.json")
    with pytest.raises(SmleInputError, match=rf"file '{tmp_path}' is a folder"):
        smle.FitResult.from_json(tmp_path)


@pytest.mark.parametrize("kind, convert, message", [
    ("complex", lambda y: y + 0.1j, r"not complex numbers: np.complex128\(.*\) at position 0"),
    ("complex, zero imaginary", lambda y: y.astype(complex), "not complex numbers"),
    ("numeric text", lambda y: y.astype(str), r"not text: np.str_\('.*'\) at position 0 \(40 value"),
    ("a word among numbers", lambda y: [*y[:-1], "n/a"], r"not text: np.str_\('n/a'\) at position 39 .* 1 not readable"),
    ("objects", lambda y: np.array([*y[:-1], {"a": 1}], dtype=object), r"not dict: \{'a': 1\} at position 39"),
])
def test_complex_or_text_observations_are_refused_everywhere(returns, kind, convert, message):
    # before the check a float conversion dropped imaginary parts and read numeric text silently
    for name, call in _entry_points(convert(returns)).items():
        with pytest.raises(SmleInputError, match=rf"y must be numeric observations, {message}"):
            call()


def test_numbers_held_as_objects_are_still_accepted(returns):
    as_objects = np.array(list(returns), dtype=object)
    assert smle.loglik("sv", SV, as_objects, n_draws=4).value == smle.loglik("sv", SV, returns, n_draws=4).value


def test_prices_are_refused_by_every_entry_point_with_one_message(returns):
    prices = 100.0 * np.exp(np.cumsum(returns / 100.0))
    for name, call in _entry_points(prices).items():
        with pytest.raises(SmleInputError, match=r"y looks like prices, not returns \(all positive, lag-1 "
                                                 r"autocorrelation 0\.\d+\); model 'sv' expects returns"):
            call()

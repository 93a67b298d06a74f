"""3DEnVar: its hybrid covariance's two limits against the 3D-Var and the ETKF on the same inputs, its
lanes against separate runs, and its one-line checks."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import assimbench
from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve
from assimbench.filters.kalman.etkf import etkf_analysis
from assimbench.filters.kalman.inflation import inflate_anomalies
from assimbench.filters.variational.envar import hybrid_covariance
from assimbench.filters.variational.threedvar import gauss_newton_3dvar
from assimbench.localization import gaspari_cohn, ring_distance
from assimbench.models.climatology import climatology

RING = ["model.size=20", "observation.stride=2", "filter=3denvar", "filter.members=8", "cycles=5", "burn_in=0",
        "output=null"]


def _one_analysis(overrides, seed=0):
    """The built filter's analysis of a random forecast ensemble, with the plan's operator and settings."""
    plan = resolve(compose_config(RING + overrides))
    rng = np.random.default_rng(seed)
    prior = jnp.asarray(3.0 + 2.0 * rng.standard_normal((8, 20)))
    y = jnp.asarray(3.0 + 2.0 * rng.standard_normal(plan.setup.operator.size))
    filt = plan.setup.filter
    state = filt.init(jax.random.PRNGKey(0), prior, plan.settings)
    analysed, _ = filt.analyse(jax.random.PRNGKey(1), state, y, plan.settings)
    return plan, prior, y, np.asarray(analysed.members)


def test_with_no_ensemble_weight_the_mean_is_the_3dvar_analysis():
    """beta = 0: B = s B_c, so the mean is the 3D-Var's with b_scale = s, computed here by the 3D-Var's
    own Gauss-Newton step from the forecast mean (the bench's 3D-Var, same inputs)."""
    plan, prior, y, members = _one_analysis(["filter.ensemble_weight=0.0", "filter.static_scale=0.3",
                                             "filter.inflation=1.0"])
    b_cov = 0.3 * jnp.asarray(climatology(plan.setup.model)[1])
    error_var = plan.settings["observation"]["error_std"] ** 2
    expected = gauss_newton_3dvar(prior.mean(axis=0), y, b_cov, error_var, plan.setup.operator, 1)[-1]
    np.testing.assert_allclose(members.mean(axis=0), np.asarray(expected), rtol=0, atol=1e-12)


def test_with_the_whole_weight_on_an_unlocalized_ensemble_the_mean_is_the_etkfs():
    """beta = 1, no localization, linear h: the variational mean minimises the same quadratic as the
    ETKF, x_b + P_e H^T (H P_e H^T + R)^-1 d (textbook identity; common practice), so the two means
    agree to round-off; the inflation acts on the ensemble both use."""
    plan, prior, y, members = _one_analysis(["filter.ensemble_weight=1.0", "filter.radius=null",
                                             "filter.inflation=1.1"])
    inflated = inflate_anomalies(prior, 1.1)
    operator = plan.setup.operator
    etkf = np.asarray(etkf_analysis(inflated, operator(inflated), y, plan.settings["observation"]["error_std"] ** 2))
    np.testing.assert_allclose(members.mean(axis=0), etkf.mean(axis=0), rtol=0, atol=1e-8)
    # The members are the ETKF's, recentred on the variational mean (here the same mean).
    np.testing.assert_allclose(members, etkf, rtol=0, atol=1e-8)


def test_the_hybrid_covariance_blends_the_two_parts_with_the_gaspari_cohn_taper():
    """B = (1 - beta) s B_c + beta (P_e o C), checked entry by entry against numpy's covariance and
    the Gaspari-Cohn taper (Gaspari & Cohn 1999, QJRMS 125, eq. 4.10) of ring distance."""
    rng = np.random.default_rng(3)
    members = rng.standard_normal((6, 10))
    climate = np.cov(rng.standard_normal((50, 10)).T)
    grid = np.arange(10.0)
    taper = np.asarray(gaspari_cohn(jnp.asarray(ring_distance(grid[:, None], grid[None, :], 10) / 2.5)))
    got = hybrid_covariance(jnp.asarray(members), jnp.asarray(climate), 0.3, 0.7, jnp.asarray(taper))
    expected = 0.7 * 0.7 * climate + 0.3 * np.cov(members.T) * taper
    np.testing.assert_allclose(np.asarray(got), expected, rtol=1e-12, atol=1e-14)


def test_ensemble_weight_lanes_equal_the_same_settings_run_one_by_one():
    base = ["filter=3denvar", "filter.members=10", "cycles=150", "burn_in=50", "diagnostics=[]", "output=null"]
    weights = [0.0, 0.5, 1.0]
    lanes = assimbench.run(base + [f"lanes.filter.ensemble_weight=[{','.join(map(str, weights))}]"])
    for lane, weight in enumerate(weights):
        alone = assimbench.run(base + [f"filter.ensemble_weight={weight}"])
        np.testing.assert_allclose(lanes.series["rmse_analysis"][lane], alone.series["rmse_analysis"], rtol=0,
                                   atol=1e-10, err_msg=f"weight {weight}")


def test_on_the_demo_ring_a_hybrid_beats_both_of_its_pure_forms_on_every_truth():
    """Lorenz-96 n = 40 observed at every second variable, 10 members, localization radius 4: a small
    static part (s = 0.005, 20% of the weight) beside the localized ensemble covariance analyses
    better than either pure form, on each of 4 truths (the hybrid's gain at small ensembles: Hamill &
    Snyder 2000, Mon. Wea. Rev. 128; from memory). Measured: static 3.15, hybrid 0.368, ensemble 0.381
    (the static 3D-Var cannot fill the unobserved variables from its broad covariance)."""
    result = assimbench.run(["observation=every_other_station", "filter=3denvar", "filter.members=10",
                             "filter.inflation=1.05", "filter.static_scale=0.005", "cycles=800", "burn_in=200",
                             "replicates=4", "lanes.filter.ensemble_weight=[0.0,0.8,1.0]", "diagnostics=[]",
                             "output=null"])
    static, hybrid, ensemble = np.asarray(result.per_replicate["rmse_analysis"])
    assert np.all(hybrid < ensemble) and np.all(hybrid < static), (static, hybrid, ensemble)


@pytest.mark.parametrize("override, message", [
    ("filter.ensemble_weight=1.5", "filter.ensemble_weight=1.5 is not allowed: a weight from 0 to 1"),
    ("filter.static_scale=0", "filter.static_scale=0.0 is not allowed: a finite factor > 0"),
    ("filter.radius=-1", "filter.radius=-1.0 is not allowed: a finite half-width > 0 in grid units, or null for no "
                         "localization"),
])
def test_bad_hybrid_settings_are_one_line(override, message):
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(["filter=3denvar", override]))
    assert str(caught.value) == message

"""The catalogue is the only registry: every spec in it is selectable, typed, built as its traits
say, and the package's imports flow one way with nothing happening at import."""

import ast
import os
import subprocess
import sys
from pathlib import Path

import jax
import numpy as np
import pytest

from assimbench.config.catalogue import catalogue
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve

PACKAGE = Path(__file__).resolve().parents[2] / "assimbench"
FILTERS = sorted(catalogue().filters)
MODELS = sorted(catalogue().models)
SMALL = ["cycles=20", "burn_in=5", "model.size=12", "output=null"]


@pytest.mark.parametrize("name", FILTERS)
def test_every_filter_is_selectable_and_built_as_its_spec_says(name):
    spec = catalogue().filters[name]
    assert spec.schema().name == name  # the schema's name field selects the spec
    plan = resolve(compose_config(SMALL + [f"filter={name}"]))
    built = plan.setup.filter
    node = plan.config.filter
    assert built.members == spec.members(node)
    assert built.weighted == spec.weighted
    assert built.assimilates == spec.assimilates
    assert built.reports_inflation == spec.reports_inflation(node)
    if spec.smoothable(node):  # it carries a fixed-lag smoother, or smooths by itself
        smoothing = resolve(compose_config(SMALL + [f"filter={name}", "smoother.lag=1"])).setup.filter
        state = smoothing.init(jax.random.PRNGKey(0), jax.numpy.zeros((built.members, 12)), plan.settings)
        assert state.lagged.shape == (1, built.members, 12)
    assert set(spec.traced) <= set(spec.settings(node)) | {"adaptive_std"}  # adaptive_std is traced only when on
    assert set(spec.widest) <= set(spec.traced)


@pytest.mark.parametrize("name", FILTERS)
def test_every_traced_filter_setting_is_a_lane_key(name):
    spec = catalogue().filters[name]
    for key in spec.traced:
        value = compose_config(SMALL + [f"filter={name}"]).filter[key]
        if value is None:
            continue  # a radius switched off has no value to sweep
        cfg = compose_config(SMALL + [f"filter={name}", f"lanes.filter.{key}=[{value}]"], validate=False)
        assert list(cfg.lanes.filter[key]) == [value]


@pytest.mark.parametrize("name", MODELS)
def test_every_model_spec_knows_its_sizes_ring_and_parameters_before_it_is_built(name):
    spec = catalogue().models[name]
    node = compose_config([f"model={name}"], validate=False).model
    model = spec.build(node)
    assert spec.sizes(node) == (model.size, model.resolved_size)
    assert spec.ring == model.ring
    assert set(spec.traced) == set(model.params)


def _kalman(mean, cov, h, r, y):
    """The Kalman (1960) analysis: K = P H^T (H P H^T + R)^-1, x_a = x_b + K (y - H x_b),
    P_a = (I - K H) P (textbook identity)."""
    gain = cov @ h.T @ np.linalg.inv(h @ cov @ h.T + r)
    return mean + gain @ (y - h @ mean), (np.eye(mean.size) - gain @ h) @ cov


def _correlation(shape: str, length: float):
    """rho(d) on the 8-ring's stations 0, 2, 4, 6 (d the ring distance), exponential exp(-d/L) or
    Gaussian exp(-d^2 / (2 L^2)) (common practice); None: independent errors."""
    if shape is None:
        return np.eye(4)
    d = np.abs(np.arange(0, 8, 2)[:, None] - np.arange(0, 8, 2)[None, :])
    d = np.minimum(d, 8 - d)
    return np.exp(-d / length) if shape == "exponential" else np.exp(-0.5 * (d / length) ** 2)


@pytest.mark.parametrize("factors, shape, length", [(None, None, 0.0), ([1.0, 2.0, 0.5, 1.5], None, 0.0),
                                                    ([1.0, 2.0, 0.5, 1.5], "exponential", 1.5),
                                                    (None, "gaussian", 1.0)])
@pytest.mark.parametrize("name", sorted(n for n, s in catalogue().filters.items() if s.kalman_exact))
def test_filters_that_declare_it_equal_the_kalman_filter_on_a_linear_gaussian_problem(name, factors, shape, length):
    """One analysis with no inflation and no localization, from an ensemble of 30 members of an 8-variable
    state, observed at every other variable with error 0.5: the analysis mean and covariance equal
    the Kalman filter's from the ensemble's sample mean and covariance (Evensen 2003, Ocean Dyn. 53;
    Hunt et al. 2007, Physica D 230, Sec. 2); with per-station factors and correlated errors,
    R = 0.25 diag(factors) rho diag(factors), which the filters assimilate whitened by R's Cholesky
    factor (the full R in the textbook formula here)."""
    overrides = ["model.size=8", "observation.stride=2", "observation.error_std=0.5", f"filter={name}",
                 "filter.members=30", "filter.inflation=1.0"]
    if factors is not None:
        overrides.append("observation.error_factors=[" + ",".join(map(str, factors)) + "]")
    if shape is not None:
        overrides += [f"observation.correlation_length={length}", f"observation.correlation_shape={shape}"]
    if "radius" in compose_config([f"filter={name}"], validate=False).filter:
        overrides.append("filter.radius=null")
    plan = resolve(compose_config(overrides))
    filt, settings, operator = plan.setup.filter, plan.settings, plan.setup.operator
    rng = np.random.default_rng(3)
    ensemble = rng.normal(size=(30, 8)) @ np.linalg.cholesky(np.eye(8) + 0.5).T + 2.0
    y = rng.normal(size=operator.size)
    key = jax.random.PRNGKey(0)
    state = filt.init(key, jax.numpy.asarray(ensemble), settings)
    analysed, _ = filt.analyse(key, state, jax.numpy.asarray(y), settings)
    members = np.asarray(analysed.members)
    h = np.eye(8)[operator.indices]
    scale = np.diag(factors if factors is not None else np.ones(operator.size))
    r = 0.25 * scale @ _correlation(shape, length) @ scale
    mean, cov = _kalman(ensemble.mean(axis=0), np.cov(ensemble, rowvar=False), h, r, y)
    np.testing.assert_allclose(members.mean(axis=0), mean, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(np.cov(members, rowvar=False), cov, rtol=1e-9, atol=1e-10)


def _imports(path: Path) -> tuple:
    """(module-level package imports, function-local package imports) of one source file."""
    tree = ast.parse(path.read_text())
    top, local = set(), []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("assimbench"):
            names = [node.module + "." + a.name for a in node.names]
            target = top if node.col_offset == 0 else local
            if target is top:
                top.update([node.module] + names)
            else:
                local.append(node.module)
    return top, local


def _module(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def test_the_import_graph_has_no_circle_and_no_function_local_import():
    files = {_module(p): p for p in PACKAGE.rglob("*.py")}
    graph = {}
    for name, path in files.items():
        top, local = _imports(path)
        assert not local, f"{name} imports {local} inside a function"
        graph[name] = {m for m in top if m in files and m != name}
    state = {}

    def visit(name, trail):
        if state.get(name) == "done":
            return
        assert state.get(name) != "open", "import circle: " + " -> ".join(trail + [name])
        state[name] = "open"
        for other in sorted(graph[name]):
            visit(other, trail + [name])
        state[name] = "done"

    for name in sorted(graph):
        visit(name, [])


def test_importing_the_package_switches_on_float64_and_nothing_else():
    code = (
        "import sys, jax, assimbench\n"
        "from omegaconf import OmegaConf\n"
        "from hydra.core.config_store import ConfigStore\n"
        "assert jax.config.jax_enable_x64\n"
        "assert not OmegaConf.has_resolver('job_folder')\n"
        "assert not jax.config.jax_compilation_cache_dir\n"
        "assert 'schema_experiment.yaml' not in ConfigStore.instance().repo\n"
        "assert 'matplotlib.pyplot' not in sys.modules\n"
    )
    env = {k: v for k, v in os.environ.items() if k != "ASSIMBENCH_COMPILE_CACHE"}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr

"""Third-party filters arrive through the documented entry-point group, never through a path in a config."""

import os
import subprocess
import sys
import textwrap

import h5py

PLUGIN = '''
from dataclasses import dataclass

from assimbench.config.spec import FilterSpec
from assimbench.filters.base import EnsembleState, Filter, keep_ensemble


@dataclass
class NudgingConfig:
    name: str = "nudging"
    members: int = 4
    gain: float = 0.5


def build(node, context):
    operator = context.operator

    def analyse(key, state, y, settings):
        members = state.members
        pulled = members[:, operator.indices] + settings["filter"]["gain"] * (y - operator(members))
        return EnsembleState(members.at[:, operator.indices].set(pulled)), {}

    return Filter("nudging", int(node.members), keep_ensemble, analyse)


def check(c, model):
    c.integer("members", 2, "an integer >= 2")
    c.real("gain", "a finite gain in (0, 1]", minimum=0.0, maximum=1.0)


SPEC = FilterSpec(name="nudging", schema=NudgingConfig, build=build, settings=lambda node: {"gain": float(node.gain)},
                  check=check, traced=("gain",))
'''


def _site(tmp_path, entry_points):
    site = tmp_path / "site"
    info = site / "nudging_plugin-0.1.dist-info"
    info.mkdir(parents=True)
    (site / "nudging_plugin.py").write_text(PLUGIN)
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: nudging-plugin\nVersion: 0.1\n")
    (info / "entry_points.txt").write_text(textwrap.dedent(entry_points))
    return site


def _run(args, tmp_path, site):
    script = os.path.join(os.path.dirname(sys.executable), "assimbench")
    command = [script] if os.path.exists(script) else [sys.executable, "-m", "assimbench"]
    env = dict(os.environ, PYTHONPATH=str(site))
    return subprocess.run(command + args, cwd=tmp_path, env=env, capture_output=True, text=True, timeout=600)


SMALL = ["cycles=40", "burn_in=5", "model.size=10"]


def test_an_installed_filter_plugin_is_selectable_typed_and_stored(tmp_path):
    site = _site(tmp_path, "[assimbench.filters]\nnudging = nudging_plugin:SPEC\n")
    target = tmp_path / "nudged.h5"
    done = _run(["filter=nudging", "filter.gain=0.3"] + SMALL + [f"output={target}"], tmp_path, site)
    assert done.returncode == 0, done.stderr
    with h5py.File(target, "r") as f:
        assert f.attrs["complete"] and "name: nudging" in f.attrs["config"] and "gain: 0.3" in f.attrs["config"]
    lanes = _run(["filter=nudging", "lanes.filter.gain=[0.2,0.4]", "output=null"] + SMALL, tmp_path, site)
    assert lanes.returncode == 0, lanes.stderr  # its traced key is a lane key
    bad = _run(["filter=nudging", "filter.gain=strong"] + SMALL, tmp_path, site)
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1 and "filter.gain" in bad.stderr


def test_a_broken_plugin_is_named_in_one_line_and_the_built_ins_still_run(tmp_path):
    site = _site(tmp_path, "[assimbench.filters]\nbroken = no_such_module:PLUGIN\netkf = nudging_plugin:SPEC\n")
    done = _run(SMALL + ["filter.members=5", "output=null"], tmp_path, site)
    assert done.returncode == 0, done.stderr
    assert "plugin broken" in done.stderr and "not loaded" in done.stderr
    assert "plugin etkf" in done.stderr and "taken by a built-in" in done.stderr
    unknown = _run(["filter=broken"] + SMALL, tmp_path, site)
    assert unknown.returncode == 2 and "filter=broken" in unknown.stderr

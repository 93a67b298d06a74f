"""What makes a result file reproducible: the resolved config, its hash, versions, seeds, time."""

import datetime
import hashlib
import json
import platform
from importlib import metadata

from omegaconf import DictConfig, OmegaConf

from assimbench._version import __version__

LIBRARIES = ("jax", "jaxlib", "numpy", "scipy", "h5py", "hydra-core", "omegaconf")


def content_hash(plain) -> str:
    """SHA-256 of a plain (JSON-able) value, keys sorted."""
    return hashlib.sha256(json.dumps(plain, sort_keys=True).encode()).hexdigest()


def config_hash(cfg: DictConfig) -> str:
    """SHA-256 of the resolved config without ``output`` and ``workers`` (where a result goes and how
    many processes computed it do not change it)."""
    plain = OmegaConf.to_container(cfg, resolve=True)
    plain.pop("output", None)
    plain.pop("workers", None)
    return content_hash(plain)


def provenance_versions() -> dict:
    """Versions of the package, Python and the libraries, and the machine kind."""
    versions = {}
    for name in LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return {
        "assimbench_version": __version__,
        "python_version": platform.python_version(),
        "library_versions": " ".join(f"{k}={v}" for k, v in versions.items()),
        "machine": platform.machine(),
    }


def provenance(cfg: DictConfig, experiment_keys: list) -> dict:
    """Root attributes of a result file: config, versions, seeds, time, and the experiment key of
    each lane (one key without lanes; space-separated, one per lane, with lanes)."""
    return {
        "config": OmegaConf.to_yaml(cfg, resolve=True),
        "config_hash": config_hash(cfg),
        **provenance_versions(),
        "seed": int(cfg.seed),
        "replicates": int(cfg.replicates),
        "replicate_keys": "fold_in(PRNGKey(seed), r) for r = 0 .. replicates-1",
        "experiment_key": " ".join(experiment_keys),
        "created": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
    }

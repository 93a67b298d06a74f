"""JAX's persistent compilation cache, so a repeated identical run skips compiling.

Location: ``$ASSIMBENCH_COMPILE_CACHE`` if set (``off`` switches the cache
off), else ``$XDG_CACHE_HOME/assimbench/jax`` or ``~/.cache/assimbench/jax``.
A cache directory the user has already given JAX is left alone. Entries are
keyed by JAX on the compiled program, the JAX/XLA versions and the machine,
so a changed program or library never reuses a stale entry.
"""

import os

import jax

ENVIRONMENT_VARIABLE = "ASSIMBENCH_COMPILE_CACHE"


def cache_dir() -> str | None:
    """Where compiled programs are kept, or None when the cache is off."""
    chosen = os.environ.get(ENVIRONMENT_VARIABLE)
    if chosen is not None:
        return None if chosen.strip().lower() in ("", "off", "none", "0") else os.path.expanduser(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "assimbench", "jax")


def switch_on() -> str | None:
    """Point JAX's persistent cache at :func:`cache_dir` unless JAX already has one."""
    if jax.config.jax_compilation_cache_dir:
        return jax.config.jax_compilation_cache_dir
    folder = cache_dir()
    if folder is None:
        return None
    try:
        os.makedirs(folder, exist_ok=True)
    except OSError:
        return None  # a read-only home: run without the cache rather than fail
    jax.config.update("jax_compilation_cache_dir", folder)
    # Our programs compile in about 1-5 s; cache every one of them, however small.
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
    jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)
    return folder

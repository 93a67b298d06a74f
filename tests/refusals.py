"""The check every refusal test makes: the config is refused with one line that names what is wrong.

Importable from every test folder (pytest puts tests/ on the path for its conftest.py).
"""

import pytest

from assimbench.config.checks import ConfigError
from assimbench.config.composition import compose_config
from assimbench.config.plan import resolve


def assert_refused(overrides: list, words: list) -> None:
    """Resolving the config of ``overrides`` raises ConfigError with a one-line message holding every word."""
    with pytest.raises(ConfigError) as caught:
        resolve(compose_config(overrides))
    message = str(caught.value)
    assert "\n" not in message and all(word in message for word in words), message

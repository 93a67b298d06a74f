"""Published benchmark set-ups (experiments/published/*.yaml) reproduced within their bands.

Each card names its source (paper, or "from memory") and its band. CI runs the short form of
every card; ASSIMBENCH_LONG=1 runs the full lengths.
"""

import os

import pytest

from assimbench.reproduction import Card, load_cards, measure, verdicts

FOLDER = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "experiments", "published")
CARDS = load_cards(FOLDER)


@pytest.fixture(scope="module")
def measured(long_run):
    length = "full" if long_run else "short"
    return length, {name: measure(card, length) for name, card in CARDS.items()}


@pytest.mark.long
@pytest.mark.parametrize("name", list(CARDS))
def test_published_card_is_reproduced(name, measured):
    length, values = measured
    ok, reason = verdicts(CARDS, values, length)[name]
    assert ok, f"{name}: measured {values[name]:.3f}, expected {reason} ({CARDS[name].source})"


def test_there_is_a_card_for_every_benchmark_the_filters_promise():
    assert {"l96_etkf_20", "l96_etkf_40", "l96_letkf_10", "l63_etkf_10", "l63_sir_1000", "l63_ienkf_3"} <= set(CARDS)
    # The iterative filter's card is judged against the ETKF's on the same truths.
    assert CARDS["l63_ienkf_3"].better_than == ("l63_etkf_3",)


def test_a_card_judged_against_several_cards_must_beat_each_of_them():
    """``better_than`` may name a list: the hybrid's card must beat both pure forms."""
    lengths = {"short": {"cycles": 10, "burn_in": 0, "replicates": 1, "band": [0.0, 5.0]}}
    cards = {name: Card(name=name, title=name, source="test", overrides=[], metric="rmse_analysis", lengths=lengths)
             for name in ("static", "ensemble")}
    cards["hybrid"] = Card(name="hybrid", title="hybrid", source="test", overrides=[], metric="rmse_analysis",
                           lengths=lengths, better_than=("static", "ensemble"))
    assert verdicts(cards, {"hybrid": 1.0, "static": 2.0, "ensemble": 1.1})["hybrid"][0]
    passed, reason = verdicts(cards, {"hybrid": 1.0, "static": 2.0, "ensemble": 0.9})["hybrid"]
    assert not passed and "below static, below ensemble" in reason

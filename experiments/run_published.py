"""Run every reproduction card of experiments/published/ and print measured vs expected.

    python experiments/run_published.py                 # full lengths (about 10 minutes on 2 cores)
    python experiments/run_published.py --short         # the short forms CI runs
    python experiments/run_published.py l96_etkf_20 --short  # only the named cards

Exit status 1 when any card misses its band.
"""

import argparse
import os
import sys

from assimbench.reproduction import load_cards, measure, verdicts

FOLDER = os.path.join(os.path.dirname(os.path.abspath(__file__)), "published")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("cards", nargs="*", metavar="CARD", help="names of the cards to run (default: every card)")
    parser.add_argument("--short", action="store_true", help="run the short forms")
    args = parser.parse_args()
    length = "short" if args.short else "full"
    cards = load_cards(FOLDER)
    unknown = [name for name in args.cards if name not in cards]
    if unknown:
        print(f"run_published: error: no card named {unknown[0]}; the cards are {', '.join(cards)}", file=sys.stderr)
        return 2
    if args.cards:
        cards = {name: card for name, card in cards.items() if name in args.cards}
    measured = {name: measure(card, length) for name, card in cards.items()}
    results = verdicts(cards, measured, length)
    name_width = max(len(name) for name in measured) + 2
    reason_width = max(len(reason) for _, reason in results.values()) + 2
    print(f"{'card':<{name_width}}{'measured':>10}  {'expected':<{reason_width}}{'verdict':<8}source")
    for name, card in cards.items():
        ok, reason = results[name]
        print(f"{name:<{name_width}}{measured[name]:>10.3f}  {reason:<{reason_width}}{'ok' if ok else 'MISS':<8}"
              f"{card.source}")
    return 0 if all(ok for ok, _ in results.values()) else 1


if __name__ == "__main__":
    sys.exit(main())

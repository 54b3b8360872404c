"""A rough token count for guessers that have no tokenizer of their own."""

from __future__ import annotations


def estimate_tokens(text: str) -> int:
    """Words separated by white space: an estimate only, not any model's tokenizer.

    Model tokenizers usually count more tokens than words, more still for PDDL's
    hyphenated names (common practice, not measured here); the estimate serves to
    compare budgets between local runs.
    """
    return len(str(text).split())

"""Fixtures of the safety tests: generated texts of known counts."""

from __future__ import annotations

import os

import pytest

from tests.conftest import TEST_CLIENT_HOST
from tests.safety.generated import GeneratedText, write_text

# About 20 MB: counting takes a few seconds on two cores and the store writes 1.5 million word rows.
BIG_TEXT_TOKENS = 3_000_000
BIG_TEXT_NEW_WORD_EVERY = 2
BIG_TEXT_MIN_LETTERS = 6


@pytest.fixture(autouse=True)
def no_lexigrowth_environment(monkeypatch):
    """The apps made in the tests read no LEXIGROWTH_* variable of the caller (lab mode would answer 401
    to every request, and the fuzz tests would then pass without reaching a single route), except the host
    name of Starlette's test client."""
    for name in [n for n in os.environ if n.startswith("LEXIGROWTH_")]:
        monkeypatch.delenv(name)
    monkeypatch.setenv("LEXIGROWTH_ALLOWED_HOSTS", TEST_CLIENT_HOST)


@pytest.fixture(scope="session")
def medium_text(tmp_path_factory) -> GeneratedText:
    """About 3 MB: stored within seconds, and its models take seconds more to fit."""
    return write_text(
        tmp_path_factory.mktemp("texts") / "medium.txt",
        400_000,
        new_word_every=2,
        min_letters=6,
        random_state=3,
    )


@pytest.fixture(scope="session")
def big_text(tmp_path_factory) -> GeneratedText:
    return write_text(
        tmp_path_factory.mktemp("texts") / "big.txt",
        BIG_TEXT_TOKENS,
        new_word_every=BIG_TEXT_NEW_WORD_EVERY,
        min_letters=BIG_TEXT_MIN_LETTERS,
        random_state=1,
    )

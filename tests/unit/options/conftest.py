"""Fixtures of the option tests (builders live in option_book_fixtures)."""

from __future__ import annotations

import pytest
from option_book_fixtures import AS_OF, BASE, COLUMNS, PRICES, instruments_table, positions_table

from tailtrace.options import build_book


@pytest.fixture
def demo_book():
    return build_book(positions_table(), instruments_table(), PRICES, as_of=AS_OF, columns=COLUMNS,
                      base_currency=BASE)

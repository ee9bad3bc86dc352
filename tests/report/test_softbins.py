"""Soft bin numbers: stable from lot to lot, unique, inside STDF's 0 to 32767."""

from __future__ import annotations

from hypothesis import given
from hypothesis import strategies as st

from sequencer.model.judgesettings import DEFAULT_BINS, BinRule
from sequencer.report.softbins import fixed_numbers, soft_bin_numbers

RULES = (
    BinRule(1, "pass", "IP-A"),
    BinRule(1, "pass", "IP-B"),
    BinRule(2, "fail", "guard band", ("guard-band",)),
    BinRule(5, "fail"),
)


def test_recipe_names_in_recipe_order_then_the_judges_words():
    table = soft_bin_numbers(RULES, ["short", "regulated current below min"])
    assert [table[n] for n in ("IP-A", "IP-B", "guard band")] == [1, 2, 3]
    assert table["short"] == 1005
    assert table["regulated current below min"] == 1101
    assert table["limiting voltage above max"] == 1112


def test_the_same_name_gets_the_same_number_whatever_else_the_lot_holds():
    one = soft_bin_numbers(RULES, ["odd reason", "short"])
    other = soft_bin_numbers(RULES, ["another odd one", "odd reason", "open"])
    for name in ("odd reason", "IP-A", "short"):
        assert one[name] == other[name]
    assert 20000 <= one["odd reason"] < 30000


def test_the_fixed_words_are_distinct_and_below_the_free_range():
    numbers = list(fixed_numbers().values())
    assert len(set(numbers)) == len(numbers)
    assert all(1000 <= n < 20000 for n in numbers)
    assert set(soft_bin_numbers(DEFAULT_BINS, [])) >= {"guard band", "aborted", "pass"}


@given(st.lists(st.text(min_size=1, max_size=30), max_size=40))
def test_numbers_are_unique_and_legal(names):
    table = soft_bin_numbers(RULES, names)
    assert set(names) <= set(table)
    assert len(set(table.values())) == len(table)
    assert all(0 <= n <= 32767 for n in table.values())

"""The retest policy as a table: who may be tested again, and which attempt stands."""

from __future__ import annotations

import pickle

import pytest

from sequencer.model.errors import RecipeError
from sequencer.recipe.recipebuild import parse_part_by_part
from sequencer.recipe.retest import Attempt, RetestPolicy, admit, stands
from sequencer.recipe.yamlsource import parse_yaml


def attempts(*outcomes: tuple[str, str, bool]) -> list[Attempt]:
    return [Attempt(n, v, c, s) for n, (v, c, s) in enumerate(outcomes, start=1)]


PASSED = ("pass", "pass", True)
FAILED = ("fail", "fail", True)
ABORTED = ("aborted", "fail", True)


@pytest.mark.parametrize(
    ("history", "policy", "allowed", "attempt", "why"),
    [
        ((), RetestPolicy(), True, 1, "first test"),
        ((PASSED,), RetestPolicy(), False, 2, "duplicate: passed already (attempt 1, pass)"),
        ((PASSED,), RetestPolicy(retest_passed=True), True, 2, "retest 1 of 1"),
        ((FAILED,), RetestPolicy(), True, 2, "retest 1 of 1"),
        ((FAILED, FAILED), RetestPolicy(), False, 3, "tested 2 times; no retest left"),
        ((FAILED, FAILED), RetestPolicy(retests=2), True, 3, "retest 2 of 2"),
        ((FAILED,), RetestPolicy(retests=0), False, 2, "tested 1 time; no retest left"),
        ((ABORTED,), RetestPolicy(retests=0), True, 2, "every earlier attempt was aborted"),
        ((FAILED, ABORTED), RetestPolicy(), True, 3, "retest 1 of 1"),  # aborted: not counted
    ],
)
def test_who_may_be_tested_again(history, policy, allowed, attempt, why):
    got = admit(attempts(*history), policy)
    assert (got.allowed, got.attempt) == (allowed, attempt) and why in got.why


@pytest.mark.parametrize(
    ("history", "new", "result", "expected"),
    [
        ((), ("fail", "fail"), "first", True),
        ((FAILED,), ("pass", "pass"), "last", True),
        ((FAILED,), ("pass", "pass"), "first", False),
        ((FAILED,), ("pass", "pass"), "best", True),
        ((PASSED,), ("fail", "fail"), "best", False),
        ((PASSED,), ("fail", "fail"), "last", True),
        ((FAILED,), ("aborted", "fail"), "last", False),  # an aborted test never replaces one
        ((ABORTED,), ("fail", "fail"), "first", True),  # the first completed attempt
        ((ABORTED,), ("aborted", "fail"), "last", True),  # nothing completed yet
    ],
)
def test_which_attempt_stands(history, new, result, expected):
    policy = RetestPolicy(retests=5, retest_passed=True, result=result)
    assert stands(attempts(*history), *new, policy) is expected


BAD_SECTIONS = [
    ("retests: 1\n  result: newest", "r.yaml:3: part_by_part.result must be one of last, best"),
    ("result: last\n  retests: -1", "r.yaml:3: part_by_part.retests must be 0 to 100 (got -1)"),
    ("serial_pattern: '(['", "r.yaml:2: part_by_part.serial_pattern is not a regular"),
    ("retest_passed: yes please", "r.yaml:2: part_by_part.retest_passed must be true or false"),
    ("retests: 1\n  operator: ann", "r.yaml:3: part_by_part.operator is not a known setting"),
]


def test_the_section_is_read_with_its_defaults():
    source = parse_yaml("part_by_part:\n  retests: 2\n  result: best\n", "r.yaml")
    assert parse_part_by_part(source, source.data["part_by_part"]) == RetestPolicy(2, False, "best")
    assert parse_part_by_part(source, None) == RetestPolicy(1, False, "last", "")


@pytest.mark.parametrize(("body", "message"), BAD_SECTIONS)
def test_a_wrong_section_names_file_line_and_field(body, message):
    source = parse_yaml(f"part_by_part:\n  {body}\n", "r.yaml")
    with pytest.raises(RecipeError) as caught:
        parse_part_by_part(source, source.data["part_by_part"])
    assert str(caught.value).startswith(message)
    assert pickle.loads(pickle.dumps(caught.value)).line == int(message.split(":")[1])

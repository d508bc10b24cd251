"""Fixtures of the random-intercept state and panel tests: the invented demo's inspected trees.

Small on purpose (240 rows, 6 inspectors, 3 quadrature points): the refits these tests
trigger must equal direct ``ow.fit`` calls with the same arguments, not be precise integrals.
"""
import pytest

import ordwidgets as ow
from ordwidgets.demo import inspected_trees

FORMULA = "grade ~ diameter + years"
POINTS = 3

__all__ = ["FORMULA", "POINTS", "trees", "mixed", "state"]


@pytest.fixture(scope="module")
def trees():
    return inspected_trees(n=240, n_inspectors=6, seed=4)


@pytest.fixture(scope="module")
def mixed(trees):
    return ow.fit(FORMULA, trees, random_intercepts=["inspector"], quadrature=POINTS)


@pytest.fixture
def state(mixed):
    return ow.FitState.from_fit(mixed)

"""The Examples sections of the public docstrings run and print what they show.

Run through the installed package (not the source tree) so that the compiled
kernels are the ones the examples use.
"""
import doctest
import importlib

import pytest

MODULES = ["lanqr.api", "lanqr.spectral", "lanqr.inertia", "lanqr.transforms",
           "lanqr.tridiagonal", "lanqr.vecops", "lanqr.problems", "lanqr.mmio"]


@pytest.mark.parametrize("name", MODULES)
def test_examples(name):
    module = importlib.import_module(name)
    failures, attempted = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE
                                          | doctest.ELLIPSIS)
    assert attempted > 0
    assert failures == 0

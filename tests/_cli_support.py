"""Shared helpers of the shell-command tests: run ``python -m lanqr`` and read its table."""
import os
import re
import subprocess
import sys

import numpy as np
import pytest

import lanqr

# The shell command needs the iterative solver; tests that solve are skipped
# (with this reason) in a checkout that does not have it yet.
HAS_SOLVER = all(hasattr(lanqr, name) for name in ("lowest", "highest"))
needs_solver = pytest.mark.skipif(not HAS_SOLVER, reason="lanqr.lowest/highest not in this checkout")
needs_mass = pytest.mark.skipif(
    not (HAS_SOLVER and "M" in __import__("inspect").signature(lanqr.lowest).parameters),
    reason="lanqr.lowest has no mass matrix support (M=, shift=) in this checkout",
)
needs_count = pytest.mark.skipif(not hasattr(lanqr, "count_below"),
                                 reason="lanqr.count_below not in this checkout")
needs_transforms = pytest.mark.skipif(
    not all(hasattr(lanqr, name) for name in ("nearest", "between", "count_below")),
    reason="lanqr.nearest/between/count_below not in this checkout",
)

_ROW = re.compile(r"^\s*(\d+)\s+(\S+)\s+(.*)$")


def quiet_env():
    """The environment for a child ``python -m lanqr``.

    An editable development install (``-Ceditable.rebuild=true``) checks its
    compiled modules on every import and by default announces that on stdout
    and stderr; an installed ``lanqr`` never does.  SKBUILD_EDITABLE_VERBOSE=0
    keeps the child's output what a user of the installed command sees.
    """
    env = dict(os.environ)
    env["SKBUILD_EDITABLE_VERBOSE"] = "0"
    env.setdefault("OMP_NUM_THREADS", "1")
    return env


def run_cli(*args, cwd=None, timeout=120, env=None):
    """Run ``python -m lanqr ARGS`` and return the CompletedProcess (text mode)."""
    full_env = quiet_env()
    if env:
        full_env.update(env)
    return subprocess.run(
        [sys.executable, "-m", "lanqr", *map(str, args)],
        capture_output=True, text=True, cwd=cwd, timeout=timeout, env=full_env,
    )


def table_rows(stdout):
    """The rows of the eigenpair table: list of (index, eigenvalue, rest-of-line)."""
    rows = []
    in_table = False
    for line in stdout.splitlines():
        if line.startswith("-----"):
            in_table = True
            continue
        if in_table:
            m = _ROW.match(line)
            if not m:
                break
            rows.append((int(m.group(1)), float(m.group(2)), m.group(3)))
    return rows


def table_values(stdout):
    return np.array([value for _, value, _ in table_rows(stdout)])

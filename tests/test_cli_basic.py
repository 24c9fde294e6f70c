import subprocess
import sys

import lanqr

from _cli_support import quiet_env


def test_version_from_module():
    out = subprocess.run([sys.executable, "-m", "lanqr", "--version"], capture_output=True, text=True, check=True,
                         env=quiet_env())
    assert out.stdout.strip() == f"lanqr {lanqr.__version__}"

import subprocess
import sys

import lanqr


def test_version_from_module():
    out = subprocess.run([sys.executable, "-m", "lanqr", "--version"], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == f"lanqr {lanqr.__version__}"

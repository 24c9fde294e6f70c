"""lanqr: extreme eigenpairs of large sparse symmetric operators.

Lanczos with thick restart, solved at every step by a compiled implicit-shift
QR kernel for symmetric tridiagonal matrices.
"""
from lanqr._version import __version__
from lanqr.tridiagonal import tridiag_eigen, tridiag_values, TridiagonalConvergenceError
from lanqr.api import lowest, highest, NotConvergedWarning
from lanqr.result import EigenResult
from lanqr.inertia import count_below, InertiaError
from lanqr.transforms import ShiftInvert, SingularShiftError

__all__ = [
    "__version__",
    "tridiag_eigen",
    "tridiag_values",
    "TridiagonalConvergenceError",
    "lowest",
    "highest",
    "NotConvergedWarning",
    "EigenResult",
    "count_below",
    "InertiaError",
    "ShiftInvert",
    "SingularShiftError",
]

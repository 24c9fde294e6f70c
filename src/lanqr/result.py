"""The result object returned by every public solver function."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Optional

import numpy as np


@dataclass
class CountCheck:
    """An inertia certificate: how many eigenvalues lie below ``point``.

    Attributes
    ----------
    point : float
        The point at which the count was taken (just above the largest
        returned eigenvalue, or an interval end).
    count : int
        The number of eigenvalues below ``point`` by Sylvester's law of inertia.
    expected : int
        How many the result claims lie below ``point``.
    message : str
        Empty when ``count == expected``; otherwise which cluster was cut.
    """

    point: float
    count: int
    expected: int
    message: str = ""

    @property
    def ok(self) -> bool:
        return self.count == self.expected


@dataclass
class EigenResult:
    """Eigenpairs with their certificates.

    Attributes
    ----------
    values : ndarray, shape (k,)
        Eigenvalues, ascending.
    vectors : ndarray, shape (n, k)
        Eigenvectors as columns (orthonormal; M-orthonormal with a mass matrix).
    residuals : ndarray, shape (k,)
        Relative residual norms computed explicitly from the operator:
        ``||A x - t x|| / max(|t|, floor)`` for a standard problem (see the
        solver's documentation for the floor and the generalized form).
    converged : ndarray of bool, shape (k,)
        Whether each pair met the requested tolerance.
    matvecs : int
        Operator applications (of A, or of the transformed operator).
    restarts : int
        Restarts of the Lanczos process.
    history : list of dict
        Per restart: ``{"ritz": ndarray, "estimates": ndarray, "matvecs": int}``.
    elapsed : float
        Wall time in seconds.
    tol : float
        The requested tolerance.
    method : str
        A short description of how the pairs were computed.
    count_check : CountCheck or None
        Inertia certificate, where one was made.
    info : dict
        Further details (shift used, nudges, factorization statistics...).
    """

    values: np.ndarray
    vectors: np.ndarray
    residuals: np.ndarray
    converged: np.ndarray
    matvecs: int = 0
    restarts: int = 0
    history: list = field(default_factory=list)
    elapsed: float = 0.0
    tol: float = 0.0
    method: str = ""
    count_check: Optional[CountCheck] = None
    info: dict = field(default_factory=dict)

    @property
    def all_converged(self) -> bool:
        return bool(np.all(self.converged))

    def __repr__(self) -> str:
        lines = [
            f"EigenResult({len(self.values)} pairs, {int(np.sum(self.converged))} converged, "
            f"{self.matvecs} operator applications, {self.restarts} restarts, "
            f"{self.elapsed:.3g} s{', ' + self.method if self.method else ''})",
            f"  {'#':>3}  {'eigenvalue':>24}  {'rel. residual':>13}  ok",
        ]
        for i, (v, r, c) in enumerate(zip(self.values, self.residuals, self.converged)):
            lines.append(f"  {i:>3}  {v:>24.16g}  {r:>13.2e}  {'yes' if c else 'NO'}")
        if self.count_check is not None:
            cc = self.count_check
            state = "agrees" if cc.ok else "DISAGREES: " + cc.message
            lines.append(f"  count below {cc.point:.10g}: {cc.count} (expected {cc.expected}) {state}")
        return "\n".join(lines)

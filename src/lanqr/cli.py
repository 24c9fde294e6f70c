"""The ``lanqr`` shell command.

Subcommands
-----------
``solve``  eigenpairs of a matrix (or a stiffness/mass pair) read from Matrix Market or ``.npz``
``count``  how many eigenvalues lie below a value (Sylvester inertia)
``demo``   the built-in example: the lowest tones of a crescent-shaped drumhead
``bench``  lanqr and ``scipy.sparse.linalg.eigsh`` side by side

Exit status: 0 success; 2 a problem with the input or the options (one line on
stderr, never a traceback); 3 an answer that is incomplete (pairs that did not
converge, or a count that could not be certified).
"""
from __future__ import annotations

import argparse
import csv
import inspect
import json
import os
import platform
import sys
import textwrap
import time
import warnings

import numpy as np

from lanqr._version import __version__

EXIT_OK = 0
EXIT_INPUT = 2
EXIT_INCOMPLETE = 3

CAUTION_TEXT = (
    "Caution: these results are numerical estimates for the model exactly as given "
    "(mesh, material data, supports). A structure that people will rely on must be checked "
    "against the applicable codes by a qualified engineer."
)


CAUTION = textwrap.fill(CAUTION_TEXT, width=88)


class InputProblem(Exception):
    """Something the user can fix: reported as one line, exit status 2."""


class IncompleteAnswer(Exception):
    """No certified answer could be given (e.g. an inertia count failed): one line, exit status 3."""


# ----------------------------------------------------------------------------- helpers


def _fail(message):
    raise InputProblem(message)


def _load(path, *, role):
    from lanqr.mmio import MatrixFileError, check_symmetric, read_matrix

    try:
        loaded = read_matrix(path)
        check_symmetric(loaded)
    except MatrixFileError as exc:
        _fail(f"{role}: {exc}")
    return loaded


def _load_problem(args):
    """Read the matrix (and mass matrix) named on the command line, validated."""
    from lanqr.mmio import MatrixFileError, check_mass

    stiffness = _load(args.file, role="matrix")
    mass = None
    if getattr(args, "mass", None):
        mass = _load(args.mass, role="mass matrix")
        try:
            check_mass(stiffness, mass)
        except MatrixFileError as exc:
            _fail(f"mass matrix: {exc}")
    return stiffness, mass


def _versions():
    import scipy

    info = {
        "lanqr": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "platform": platform.platform(),
    }
    try:
        import threadpoolctl
    except ImportError:
        info["threadpools"] = None
    else:
        info["threadpools"] = [
            {k: pool.get(k) for k in ("user_api", "internal_api", "num_threads", "version")}
            for pool in threadpoolctl.threadpool_info()
        ]
    return info


def _frequencies(values):
    """f = sqrt(λ)/(2π) for λ = ω² >= 0; NaN where λ < 0 (no real frequency)."""
    values = np.asarray(values, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(values >= 0, np.sqrt(np.maximum(values, 0.0)) / (2.0 * np.pi), np.nan)


def _require_matplotlib():
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt  # noqa: F401
    except ImportError:
        _fail("--plot needs matplotlib, which is not installed: pip install 'lanqr[plot]'")
    return plt


def _check_plot_target(path):
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        _fail(f"--plot {path}: folder {folder} does not exist")


def _to_jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _to_jsonable(obj.tolist())
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if np.isfinite(value) else None
    if isinstance(obj, (int, str)) or obj is None:
        return obj
    return str(obj)


# ----------------------------------------------------------------------------- progress


class _Progress:
    """One overwritten line on stderr per restart; only on a terminal, never with --quiet."""

    def __init__(self, enabled, k):
        self.enabled = enabled
        self.k = k
        self.start = time.perf_counter()
        self.shown = False

    def __call__(self, info):
        if not self.enabled:
            return
        restarts = info.get("restarts", info.get("restart"))
        parts = [f"restart {restarts}" if restarts is not None else "working"]
        converged = info.get("nconverged", info.get("converged"))
        if isinstance(converged, (list, tuple, np.ndarray)):
            converged = int(np.sum(converged))
        if converged is not None:
            parts.append(f"{converged} of {self.k} converged")
        elif info.get("locked") is not None:
            parts.append(f"{info['locked']} pairs locked of {self.k} wanted")
        if info.get("phase") == "verify":
            parts.append("looking for missed copies")
        if info.get("matvecs") is not None:
            parts.append(f"{info['matvecs']} operator applications")
        parts.append(f"{time.perf_counter() - self.start:.1f} s")
        sys.stderr.write("\r  " + ", ".join(parts).ljust(76))
        sys.stderr.flush()
        self.shown = True

    def close(self):
        if self.shown:
            sys.stderr.write("\n")
            sys.stderr.flush()


def _progress_enabled(args):
    return (not getattr(args, "quiet", False)) and sys.stderr.isatty()


_OPTION_NAMES = {"M": "--mass", "shift": "--shift", "max_restarts": "--max-restarts", "certify": "--certify"}


def _call(func, *pos, callback=None, **kwargs):
    """Call a solver function with the keywords it declares.

    Keywords left at None are dropped when the function does not know them;
    a keyword with a value the function cannot take is an input problem (a
    mass matrix must never be dropped silently).
    """
    try:
        params = inspect.signature(func).parameters
    except (TypeError, ValueError):
        params = {}
    accepts_any = any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values())
    if callback is not None:
        kwargs["callback"] = callback
    passed = {}
    for key, value in kwargs.items():
        if accepts_any or key in params:
            passed[key] = value
        elif value is not None and key != "callback":
            option = _OPTION_NAMES.get(key, key)
            _fail(f"{option} is not supported by lanqr.{func.__name__} in this build")
    return func(*pos, **passed)


# ----------------------------------------------------------------------------- output


def _table(result, *, frequencies=None, label="no.", value_label="eigenvalue"):
    """Rows of the eigenpair table as one string."""
    freq_col = frequencies is not None
    head = f"{label:>5}  {value_label:>23}"
    if freq_col:
        head += f"  {'frequency [Hz]':>15}"
    head += f"  {'rel. residual':>13}  status"
    lines = [head, "-" * len(head)]
    for i, (value, resid, ok) in enumerate(zip(result.values, result.residuals, result.converged)):
        row = f"{i + 1:>5}  {value:>23.15g}"
        if freq_col:
            f = frequencies[i]
            row += f"  {_format_hz(f):>15}"
        row += f"  {resid:>13.2e}  {'converged' if ok else '** NOT CONVERGED **'}"
        lines.append(row)
    return "\n".join(lines)


def _format_hz(f):
    if not np.isfinite(f):
        return "(λ < 0)"
    return f"{f:.3f}" if 1e-3 <= f < 1e7 else f"{f:.6e}"


def _summary(result):
    parts = [
        f"{result.matvecs} operator application{'s' if result.matvecs != 1 else ''}",
        f"{result.restarts} restart{'s' if result.restarts != 1 else ''}",
        f"{result.elapsed:.3g} s",
    ]
    cc = result.count_check
    if cc is not None:
        verdict = "agrees" if cc.ok else "DISAGREES"
        parts.append(f"inertia count below {cc.point:.8g}: {cc.count}, expected {cc.expected}, {verdict}")
    else:
        parts.append("no inertia count made")
    return "summary: " + "; ".join(parts)


def _result_dict(result, frequencies=None):
    out = {
        "values": result.values,
        "relative_residuals": result.residuals,
        "converged": result.converged,
        "operator_applications": result.matvecs,
        "restarts": result.restarts,
        "elapsed_s": result.elapsed,
        "tolerance": result.tol,
        "method": result.method,
        "all_converged": bool(np.all(result.converged)),
    }
    if frequencies is not None:
        out["frequencies_hz"] = frequencies
    cc = result.count_check
    out["count_check"] = None if cc is None else {
        "point": cc.point, "count": cc.count, "expected": cc.expected, "ok": cc.ok, "message": cc.message,
    }
    return out


def _report(command, inputs, options, results, *, caution=False):
    report = {
        "lanqr_report": 1,
        "command": command,
        "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "inputs": inputs,
        "options": options,
        "versions": _versions(),
        "results": results,
    }
    if caution:
        report["caution"] = CAUTION_TEXT
    return _to_jsonable(report)


def _write_outputs(folder, result, report, frequencies=None):
    """eigenpairs.csv, eigenvectors.npy and report.json in ``folder``."""
    try:
        os.makedirs(folder, exist_ok=True)
        with open(os.path.join(folder, "eigenpairs.csv"), "w", newline="") as fh:
            writer = csv.writer(fh)
            header = ["index", "eigenvalue"]
            if frequencies is not None:
                header.append("frequency_hz")
            header += ["relative_residual", "converged"]
            writer.writerow(header)
            for i in range(len(result.values)):
                row = [i + 1, repr(float(result.values[i]))]
                if frequencies is not None:
                    row.append(repr(float(frequencies[i])) if np.isfinite(frequencies[i]) else "")
                row += [repr(float(result.residuals[i])), "yes" if result.converged[i] else "no"]
                writer.writerow(row)
        np.save(os.path.join(folder, "eigenvectors.npy"), np.asarray(result.vectors))
        with open(os.path.join(folder, "report.json"), "w") as fh:
            json.dump(report, fh, indent=2)
            fh.write("\n")
    except OSError as exc:
        _fail(f"--out {folder}: cannot write ({exc.strerror or exc})")


# ----------------------------------------------------------------------------- plots


def _shift_of(result):
    """The single shift of a shift-invert run (None for a plain run or several shifts)."""
    shift = (getattr(result, "info", None) or {}).get("shift")
    if isinstance(shift, (int, float, np.floating)) and not isinstance(shift, bool) and np.isfinite(shift):
        return float(shift)
    return None


def _history_space_values(result):
    """The returned eigenvalues as the restart records hold them.

    A shift-invert run iterates with (K - σM)^-1 M, whose eigenvalues are
    ν = 1/(λ - σ) (Ericsson and Ruhe 1980); its records hold Ritz values ν.
    Runs with several shifts (``between``) cannot be followed: None.
    """
    values = np.asarray(result.values, dtype=float)
    info = getattr(result, "info", None) or {}
    if "pieces" in info:
        return None
    shift = _shift_of(result)
    if shift is None:
        return values
    with np.errstate(divide="ignore"):
        return 1.0 / (values - shift)


def _follow_pairs(result, history):
    """For each returned pair, the restarts at which a Ritz value approximated it and its estimate.

    Ritz values are matched to the returned eigenvalues one to one at each
    restart (an optimal assignment, so that both copies of a double eigenvalue
    get their own Ritz value).  A match counts only while the Ritz value is
    within its residual estimate of the eigenvalue, as some eigenvalue must
    be (reference-values.md §12, bound 1); a pair is followed until its
    estimate first meets the tolerance: after that it is locked and leaves
    the active basis.  Estimates are divided by |eigenvalue|, like the tolerance.
    """
    from scipy.optimize import linear_sum_assignment

    values = _history_space_values(result)
    if values is None:
        return [([], []) for _ in result.values]
    scales = np.where(values != 0, np.abs(values), 1.0)
    traces = [([], []) for _ in values]
    done = np.zeros(len(values), dtype=bool)
    for number, step in enumerate(history):
        ritz = np.asarray(step.get("ritz", []), dtype=float)
        est = np.asarray(step.get("estimates", []), dtype=float)
        active = np.flatnonzero(~done)
        if ritz.size == 0 or est.size != ritz.size or active.size == 0:
            continue
        # A polynomial-filter run records no value in A for the Ritz pairs
        # the filter does not amplify (NaN, estimate inf): skip them.
        known = np.isfinite(ritz) & np.isfinite(est)
        ritz, est = ritz[known], est[known]
        if ritz.size == 0:
            continue
        distance = np.abs(ritz[None, :] - values[active, None])
        slack = est[None, :] + 10.0 * result.tol * scales[active, None]
        eligible = distance <= slack
        # Ineligible matches cost more than any eligible set, so they are used last and skipped.
        cost = np.where(eligible, distance / scales[active, None], 1e6 + distance / scales[active, None])
        rows, cols = linear_sum_assignment(cost)
        for r, j in zip(rows, cols):
            i = active[r]
            if not eligible[r, j]:
                continue
            relative = est[j] / scales[i]
            traces[i][0].append(number)
            traces[i][1].append(max(relative, np.finfo(float).tiny))
            if relative <= result.tol:
                done[i] = True
    return traces


def _plot_history(path, result, *, title):
    """Residual estimate of each returned pair against operator applications."""
    plt = _require_matplotlib()
    fig, ax = plt.subplots(figsize=(7, 4.5))
    history = list(result.history or [])
    use_matvecs = bool(history) and all("matvecs" in step for step in history)
    traces = _follow_pairs(result, history)
    drawn = 0
    for i, (steps, ys) in enumerate(traces):
        if steps:
            xs = [history[s]["matvecs"] if use_matvecs else s + 1 for s in steps]
            ax.semilogy(xs, ys, marker=".", label=f"pair {i + 1} ({result.values[i]:.6g})")
            drawn += 1
    shift = _shift_of(result)
    if drawn:
        if shift is None:
            ax.axhline(result.tol, color="0.4", linestyle="--", linewidth=1, label=f"tolerance {result.tol:g}")
        ax.legend(fontsize=7, ncol=2)
    else:
        reason = ("this run used several shifts" if "pieces" in (result.info or {})
                  else "no restart history was recorded for this run (small problems are solved densely)")
        ax.text(0.5, 0.5, reason, ha="center", va="center", transform=ax.transAxes, fontsize=9)
    ax.set_xlabel("operator applications" if use_matvecs else "restart")
    if shift is None:
        ax.set_ylabel("residual estimate / |eigenvalue|")
    else:
        # The estimates belong to the transformed operator; its tolerance test is the solver's own.
        ax.set_ylabel(f"residual estimate / |ν|,  ν = 1/(λ - {shift:g})")
    ax.set_title(title, fontsize=10)
    ax.grid(True, which="both", alpha=0.3)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def _plot_modes(path, drum, result, frequencies, count=6):
    plt = _require_matplotlib()
    count = min(count, len(result.values))
    cols = 3
    rows = (count + cols - 1) // cols
    fig, axes = plt.subplots(rows, cols, figsize=(3.4 * cols, 3.2 * rows))
    axes = np.atleast_1d(axes).ravel()
    inside = drum["inside"]
    extent = [drum["x"][0], drum["x"][-1], drum["y"][0], drum["y"][-1]]
    for i, ax in enumerate(axes):
        ax.set_axis_off()
        if i >= count:
            continue
        field = np.full(inside.shape, np.nan)
        mode = np.asarray(result.vectors[:, i])
        mode = mode / np.max(np.abs(mode))
        field[inside] = mode
        ax.imshow(field, origin="lower", extent=extent, cmap="RdBu_r", vmin=-1, vmax=1)
        # Nodal lines (where the membrane stays still) inside, the clamped rim in grey.
        ax.contour(drum["x"], drum["y"], np.ma.masked_invalid(field), levels=[0.0], colors="k",
                   linewidths=0.7, linestyles="dashed")
        ax.contour(drum["x"], drum["y"], inside.astype(float), levels=[0.5], colors="0.35", linewidths=0.8)
        ax.set_title(f"mode {i + 1}: {frequencies[i]:.1f} Hz", fontsize=10)
        ax.set_aspect("equal")
    fig.suptitle("lanqr demo: crescent drumhead, lowest modes (red and blue move in opposite directions)",
                 fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


# ----------------------------------------------------------------------------- solve


def _solver():
    import lanqr

    missing = [name for name in ("lowest", "highest") if not hasattr(lanqr, name)]
    if missing:
        _fail("this build of lanqr has no iterative solver (lanqr.lowest is missing)")
    return lanqr


def _run_solver(A, M, args, k, progress):
    """Dispatch to lowest / highest / nearest / between; solver ValueErrors become input problems."""
    lanqr = _solver()
    common = dict(tol=args.tol, seed=args.seed, M=M)
    if args.max_restarts is not None:
        common["max_restarts"] = args.max_restarts
    try:
        if args.near is not None:
            certify = True if args.certify else None
            return _call(lanqr.nearest, A, k, args.near, callback=progress, certify=certify, **common)
        if args.between is not None:
            lower, upper = args.between
            return _call(lanqr.between, A, lower, upper, callback=progress, **common)
        func = lanqr.highest if args.highest else lanqr.lowest
        extra = {}
        if args.polynomial_filter is not None:
            extra["polynomial_filter"] = args.polynomial_filter
        return _call(func, A, k, callback=progress, shift=args.shift, **extra, **common)
    except ValueError as exc:
        message = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        if isinstance(exc, _uncertified_errors()):
            raise IncompleteAnswer(message) from None
        _fail(message)


def _uncertified_errors():
    """Solver errors that mean "no certified answer" rather than "bad input"."""
    import lanqr

    return tuple(getattr(lanqr, name) for name in ("InertiaError",) if hasattr(lanqr, name))


def _print_notes(caught, *, keep_not_converged=False):
    import lanqr

    # The solve table and its closing warning line already report unconverged pairs.
    repeated = None if keep_not_converged else getattr(lanqr, "NotConvergedWarning", None)
    seen = set()
    for w in caught:
        if repeated is not None and issubclass(w.category, repeated):
            continue
        text = str(w.message).strip().splitlines()[0] if str(w.message).strip() else ""
        if text and text not in seen:
            seen.add(text)
            print(f"note: {text}", file=sys.stderr)


def _check_k(k, n):
    if k is None:
        return None
    if k < 1 or k >= n:
        _fail(f"-k {k} is out of range: the matrix has order {n}, so k must be between 1 and {n - 1}")
    return k


def _cmd_solve(args):
    if args.frequencies and not args.mass:
        _fail("--frequencies needs a mass matrix (--mass FILE): f = sqrt(λ)/(2π) holds for K x = λ M x")
    if args.tol is not None and not (0 < args.tol < 1):
        _fail(f"--tol {args.tol} is out of range: it must lie between 0 and 1")
    if args.between is not None and args.k is not None:
        _fail("-k does not apply to --between, which returns every eigenvalue in the interval")
    if args.shift is not None and (args.highest or args.near is not None or args.between is not None):
        _fail("--shift applies to the lowest pairs only (--near X already shifts to X)")
    if args.certify and args.near is None:
        _fail("--certify applies to --near (the lowest modes with --mass and --between are checked anyway)")
    if args.max_restarts is not None and args.max_restarts < 0:
        _fail(f"--max-restarts {args.max_restarts}: must be 0 or more")
    if args.between is not None and not args.between[0] < args.between[1]:
        _fail(f"--between {args.between[0]} {args.between[1]}: the lower end must be below the upper end")
    if args.plot:
        _require_matplotlib()
        _check_plot_target(args.plot)
    if args.out and os.path.exists(args.out) and not os.path.isdir(args.out):
        _fail(f"--out {args.out}: exists and is not a folder")
    stiffness, mass = _load_problem(args)
    n = stiffness.n
    k = args.k if args.k is not None else (None if args.between is not None else min(6, n - 1))
    _check_k(k, n)
    M = None if mass is None else mass.matrix

    progress = _Progress(_progress_enabled(args), k or 0)
    with warnings.catch_warnings(record=True) as caught:
        # The table flags unconverged pairs itself; the solver's warnings become
        # one-line notes instead of Python's two-line warning format.
        warnings.simplefilter("always")
        try:
            result = _run_solver(stiffness.matrix, M, args, k, progress)
        finally:
            progress.close()
    _print_notes(caught)

    frequencies = _frequencies(result.values) if args.frequencies else None
    wanted = ("highest" if args.highest else f"nearest {args.near:g}" if args.near is not None
              else f"between {args.between[0]:g} and {args.between[1]:g}" if args.between is not None
              else "lowest")
    inputs = {"matrix": stiffness.describe(), "mass": None if mass is None else mass.describe()}
    options = {"k": k, "wanted": wanted, "tol": args.tol, "seed": args.seed, "shift": args.shift,
               "max_restarts": args.max_restarts, "certify": args.certify, "frequencies": args.frequencies,
               "polynomial_filter": args.polynomial_filter or "auto"}
    report = _report("solve", inputs, options, _result_dict(result, frequencies),
                     caution=mass is not None)
    incomplete = (not np.all(result.converged)) or (
        result.count_check is not None and not result.count_check.ok)

    if args.json:
        json.dump(report, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        source = stiffness.path + (f" with mass matrix {mass.path}" if mass is not None else "")
        print(f"lanqr solve: {source}")
        plural = "s" if k != 1 else ""
        if args.between is not None:
            asked = f"every eigenvalue between {args.between[0]:g} and {args.between[1]:g}"
        elif args.near is not None:
            asked = f"the {k} eigenvalue{plural} nearest {args.near:g}"
        else:
            asked = f"the {k} {'highest' if args.highest else 'lowest'} eigenvalue{plural}"
        if args.shift is not None and args.near is None and args.between is None:
            asked += f" (shift {args.shift:g})"
        print(f"order {n}, {stiffness.matrix.nnz} stored entries; {asked}, tolerance {result.tol:g}")
        print()
        if len(result.values):
            print(_table(result, frequencies=frequencies))
        else:
            print("(no eigenvalues found)")
        print()
        print(_summary(result))
        if incomplete:
            unconverged = int(np.sum(~np.asarray(result.converged, dtype=bool)))
            if unconverged:
                print(f"warning: {unconverged} of {len(result.values)} pairs did not reach the tolerance "
                      f"(marked above); try a larger --tol, more restarts or a shift")
            else:
                cc = result.count_check
                print(f"warning: the inertia count does not match the pairs returned"
                      f"{': ' + cc.message if cc.message else ''}")
        if mass is not None:
            print()
            print(CAUTION)
    if args.out:
        _write_outputs(args.out, result, report, frequencies)
    if args.plot:
        _plot_history(args.plot, result, title=f"lanqr solve {os.path.basename(stiffness.path)}: {wanted}")
    return EXIT_INCOMPLETE if incomplete else EXIT_OK


# ----------------------------------------------------------------------------- count


def _cmd_count(args):
    import lanqr

    stiffness, mass = _load_problem(args)
    if not hasattr(lanqr, "count_below"):
        _fail("this build of lanqr has no inertia count (lanqr.count_below is missing)")
    M = None if mass is None else mass.matrix
    t0 = time.perf_counter()
    uncertified = _uncertified_errors()
    try:
        count = lanqr.count_below(stiffness.matrix, args.below, M=M)
    except ValueError as exc:
        message = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        if not isinstance(exc, uncertified):
            _fail(message)  # bad input the file checks did not catch (e.g. an indefinite mass matrix)
        # The factorization could not decide the sign of every pivot (x at or
        # numerically next to an eigenvalue, or a singular pencil): no count is
        # better than a wrong one.
        if args.json:
            report = _report("count", {"matrix": stiffness.describe(),
                                       "mass": None if mass is None else mass.describe()},
                             {"below": args.below}, {"count": None, "certified": False, "message": message})
            json.dump(report, sys.stdout, indent=2)
            sys.stdout.write("\n")
        if "cannot certify" not in message:
            message = f"cannot certify the number of eigenvalues below {args.below:g}: {message}"
        print(f"lanqr count: {message.rstrip('.')}; moving the value slightly usually helps", file=sys.stderr)
        return EXIT_INCOMPLETE
    elapsed = time.perf_counter() - t0
    count = int(count)
    if args.json:
        report = _report("count", {"matrix": stiffness.describe(),
                                   "mass": None if mass is None else mass.describe()},
                         {"below": args.below}, {"count": count, "certified": True, "elapsed_s": elapsed})
        json.dump(report, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        what = "the pencil (K, M)" if mass is not None else "the matrix"
        print(f"{count} eigenvalue{'s' if count != 1 else ''} of {what} lie below {args.below:g} "
              f"(order {stiffness.n}; Sylvester inertia of a symmetric factorization, {elapsed:.3g} s)")
    return EXIT_OK


# ----------------------------------------------------------------------------- demo


DEMO_MODES = 8


def _demo_kernel_only():
    """Stand-in demo for a build without the iterative solver: the tridiagonal kernel alone."""
    from lanqr.problems import laplacian_1d_values
    from lanqr.tridiagonal import tridiag_values

    n = 200
    values = tridiag_values(np.full(n, 2.0), np.full(n - 1, -1.0))
    exact = laplacian_1d_values(n)
    print(f"lanqr {__version__}: this build has no iterative solver yet; showing the tridiagonal kernel.")
    print(f"lowest 6 eigenvalues of tridiag(-1, 2, -1), order {n}, against the closed form")
    print(f"{'#':>3}  {'computed':>22}  {'closed form':>22}  {'|error|':>9}")
    for i in range(6):
        print(f"{i + 1:>3}  {values[i]:>22.16f}  {exact[i]:>22.16f}  {abs(values[i] - exact[i]):>9.1e}")
    return EXIT_OK


def _cmd_demo(args):
    from lanqr.problems import drum_membrane

    if args.plot:
        _require_matplotlib()
        _check_plot_target(args.plot)
    if not 20 <= args.cells <= 2000:
        _fail(f"--cells {args.cells}: use between 20 and 2000 grid cells across the drum")
    import lanqr

    if not hasattr(lanqr, "lowest") or "M" not in inspect.signature(lanqr.lowest).parameters:
        return _demo_kernel_only()
    drum = drum_membrane("crescent", cells=args.cells)
    K, M = drum["K"], drum["M"]
    progress = _Progress(_progress_enabled(args), DEMO_MODES)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            # Shift 0 turns the lowest tones into the largest eigenvalues of
            # K^-1 M, which Lanczos finds in a few dozen steps; K is positive
            # definite (clamped rim), so the shift is safe.
            result = _call(lanqr.lowest, K, DEMO_MODES, M=M, shift=0.0, tol=1e-10, seed=0, callback=progress)
        finally:
            progress.close()
    _print_notes(caught)
    freqs = _frequencies(result.values)
    n = K.shape[0]
    print(f"lanqr {__version__} demo: a crescent-shaped drumhead clamped at its rim")
    print(f"  disc of {100 * 0.35:.0f} cm diameter with an offset disc of {100 * 0.28:.0f} cm cut away; "
          f"tension {drum['tension']:g} N/m, {drum['areal_density']:g} kg/m²")
    print(f"  5-point differences on a {1000 * drum['h']:.2f} mm grid: {n} unknowns, "
          f"K x = ω² M x, f = ω / 2π")
    print()
    print(_table(result, frequencies=freqs, label="mode", value_label="ω² [1/s²]"))
    print()
    ratios = freqs / freqs[0]
    print("  overtone ratios f/f1: " + "  ".join(f"{r:.3f}" for r in ratios[1:]))
    print(_summary(result))
    print()
    print(CAUTION)
    if args.plot:
        _plot_modes(args.plot, drum, result, freqs)
        print(f"\nmode shapes drawn to {args.plot}")
    return EXIT_OK if np.all(result.converged) else EXIT_INCOMPLETE


# ----------------------------------------------------------------------------- bench


def _cmd_bench(args):
    from lanqr import benchmark

    if args.list:
        for case in benchmark.CASES.values():
            print(f"{case.name:<16} {case.description}")
        return EXIT_OK
    if args.repeat < 1:
        _fail(f"--repeat {args.repeat}: must be at least 1")
    if args.tol is not None and not (0 < args.tol < 1):
        _fail(f"--tol {args.tol} is out of range: it must lie between 0 and 1")
    tol = args.tol if args.tol is not None else benchmark.DEFAULT_TOL
    problems = []
    if args.file:
        if args.case:
            _fail("give either a FILE or --case names, not both")
        stiffness, mass = _load_problem(args)
        k = args.k if args.k is not None else min(6, stiffness.n - 1)
        if not 1 <= k < stiffness.n:
            _fail(f"-k {k} is out of range: SciPy's eigsh needs 1 <= k < {stiffness.n} for this matrix")
        mode = "highest" if args.highest else "nearest" if args.near is not None else "lowest"
        problems.append(benchmark.Problem(
            name=os.path.basename(stiffness.path), A=stiffness.matrix,
            M=None if mass is None else mass.matrix, k=k, mode=mode, target=args.near, shift=args.shift))
    else:
        if args.mass or args.k is not None or args.highest or args.near is not None or args.shift is not None:
            _fail("--mass, -k, --highest, --near and --shift apply to a FILE; built-in cases fix their own")
        names = args.case or list(benchmark.CASES)
        unknown = [name for name in names if name not in benchmark.CASES]
        if unknown:
            _fail(f"unknown case {unknown[0]!r}; known cases: {', '.join(benchmark.CASES)}")
        problems.extend(benchmark.CASES[name].build() for name in names)
    _solver()
    setup = benchmark.machine_setup()
    if not args.json:
        print(benchmark.format_setup(setup))
        print()
    rows = []
    skipped = []
    for problem in problems:
        reason = benchmark.unsupported_reason(problem)
        if reason is not None:
            if args.file:
                _fail(reason)
            skipped.append((problem.name, reason))
            continue
        if not args.json and not args.quiet:
            print(f"running {problem.name} (order {problem.A.shape[0]}, {problem.k} {problem.mode}) ...",
                  file=sys.stderr, flush=True)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                rows.append(benchmark.compare(problem, repeat=args.repeat, tol=tol, seed=args.seed))
            except ValueError as exc:
                _fail(f"{problem.name}: {str(exc).strip().splitlines()[0]}")
        if not args.quiet:
            _print_notes(caught, keep_not_converged=True)
    if args.json:
        json.dump(_to_jsonable({"lanqr_report": 1, "command": "bench", "tolerance": tol,
                                "repeat": args.repeat, "setup": setup, "cases": rows,
                                "skipped": [{"case": n, "reason": r} for n, r in skipped]}),
                  sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        if rows:
            print(benchmark.format_table(rows, repeat=args.repeat, tol=tol))
        for name, reason in skipped:
            print(f"skipped {name}: {reason}")
    return EXIT_OK if all(row["lanqr"]["converged"] == row["k"] for row in rows) else EXIT_INCOMPLETE


# ----------------------------------------------------------------------------- parser


def _finite_float(text):
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not np.isfinite(value):
        raise argparse.ArgumentTypeError(f"must be finite: {text!r}")
    return value


def _add_matrix_args(p, *, mass_help="mass matrix M of the pencil K x = λ M x (symmetric positive definite)"):
    p.add_argument("file", metavar="FILE", help="matrix file: Matrix Market (.mtx, .mtx.gz) or SciPy sparse .npz")
    p.add_argument("--mass", metavar="FILE", help=mass_help)


def build_parser():
    """The argument parser of ``lanqr`` with its four subcommands.

    Returns
    -------
    argparse.ArgumentParser
        Each subcommand stores its handler in ``func``.
    """
    parser = argparse.ArgumentParser(
        prog="lanqr",
        description="Extreme eigenpairs of large sparse symmetric matrices, from the shell.",
        epilog="Exit status: 0 done, 2 bad input or options, 3 incomplete answer (unconverged pairs "
               "or an uncertified count). 'lanqr demo' is a good first run.",
    )
    parser.add_argument("--version", action="version", version=f"lanqr {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    solve = sub.add_parser("solve", help="eigenpairs of a matrix file (or a stiffness/mass pair)",
                           description="Eigenpairs of the symmetric matrix in FILE (K x = λ x), or of "
                                       "K x = λ M x with --mass.")
    _add_matrix_args(solve)
    solve.add_argument("-k", type=int, default=None, metavar="K", help="number of eigenpairs (default 6)")
    which = solve.add_mutually_exclusive_group()
    which.add_argument("--highest", action="store_true", help="the largest eigenvalues instead of the smallest")
    which.add_argument("--near", type=_finite_float, metavar="X", help="the K eigenvalues closest to X")
    which.add_argument("--between", type=_finite_float, nargs=2, metavar=("A", "B"),
                       help="every eigenvalue in the interval [A, B]")
    solve.add_argument("--certify", action="store_true",
                       help="with --near: also count (by inertia) the eigenvalues below and above the pairs "
                            "found, to prove none in between was missed (two extra factorizations)")
    solve.add_argument("--shift", type=_finite_float, metavar="S",
                       help="for the lowest pairs: work with (K - S M)^-1, which converges in far fewer "
                            "steps for stiffness matrices (S must not be an eigenvalue; with --mass the "
                            "solver picks a shift itself when none is given)")
    solve.add_argument("--tol", type=float, default=1e-8, metavar="T",
                       help="relative residual each pair must reach (default 1e-8)")
    solve.add_argument("--seed", type=int, default=0, metavar="S", help="seed of the start vector (default 0)")
    solve.add_argument("--max-restarts", type=int, default=None, metavar="N",
                       help="stop after N restarts and report what converged (default: the solver's own limit)")
    solve.add_argument("--polynomial-filter", choices=("auto", "on", "off"), default=None,
                       help="lowest/highest without --mass or --shift: go on with Lanczos on a "
                            "Chebyshev polynomial of the matrix when plain Lanczos converges slowly "
                            "(auto, the default), right after the first cycle (on), or never (off)")
    solve.add_argument("--out", metavar="DIR",
                       help="write eigenpairs.csv, eigenvectors.npy and report.json into DIR")
    solve.add_argument("--json", action="store_true", help="print the JSON report instead of the table")
    solve.add_argument("--frequencies", action="store_true",
                       help="add f = sqrt(λ)/(2π) in Hz (needs --mass; K in N/m, M in kg)")
    solve.add_argument("--plot", metavar="PNG", help="draw the convergence history to PNG (needs matplotlib)")
    solve.add_argument("-q", "--quiet", action="store_true", help="no progress line on stderr")
    solve.set_defaults(func=_cmd_solve)

    count = sub.add_parser("count", help="how many eigenvalues lie below a value",
                           description="Number of eigenvalues below X, from the inertia of a symmetric "
                                       "factorization of K - X M (Sylvester's law of inertia).")
    _add_matrix_args(count)
    count.add_argument("--below", type=_finite_float, required=True, metavar="X", help="the value X")
    count.add_argument("--json", action="store_true", help="print a JSON report")
    count.set_defaults(func=_cmd_count)

    demo = sub.add_parser("demo", help="the built-in example: tones of a crescent-shaped drumhead",
                          description="Lowest vibration modes of a crescent-shaped drumhead.")
    demo.add_argument("--plot", metavar="PNG", help="draw the first mode shapes to PNG (needs matplotlib)")
    demo.add_argument("--cells", type=int, default=200, metavar="N",
                      help="grid cells across the drum (default 200; the error in the frequencies "
                           "falls like 1/N)")
    demo.add_argument("-q", "--quiet", action="store_true", help="no progress line on stderr")
    demo.set_defaults(func=_cmd_demo)

    bench = sub.add_parser("bench", help="lanqr and SciPy's eigsh side by side",
                           description="Run lanqr and scipy.sparse.linalg.eigsh on the same problems in "
                                       "this process and print their ratios (median of repeats).")
    bench.add_argument("file", metavar="FILE", nargs="?",
                       help="your own matrix (Matrix Market or .npz) instead of the built-in cases")
    bench.add_argument("--mass", metavar="FILE", help="mass matrix for FILE")
    bench.add_argument("-k", type=int, default=None, metavar="K", help="pairs for FILE (default 6)")
    bwhich = bench.add_mutually_exclusive_group()
    bwhich.add_argument("--highest", action="store_true", help="largest eigenvalues of FILE")
    bwhich.add_argument("--near", type=_finite_float, metavar="X", help="eigenvalues of FILE closest to X")
    bench.add_argument("--shift", type=_finite_float, metavar="S", help="shift for the lowest pairs of FILE")
    bench.add_argument("--case", nargs="+", metavar="NAME", help="built-in cases to run (default: all)")
    bench.add_argument("--list", action="store_true", help="list the built-in cases and stop")
    bench.add_argument("--repeat", type=int, default=3, metavar="N", help="timed runs per solver (default 3)")
    bench.add_argument("--tol", type=float, default=None, metavar="T", help="tolerance for both solvers")
    bench.add_argument("--seed", type=int, default=0, metavar="S", help="seed of the start vectors")
    bench.add_argument("--json", action="store_true", help="print the measurements as JSON")
    bench.add_argument("-q", "--quiet", action="store_true", help="no progress lines on stderr")
    bench.set_defaults(func=_cmd_bench)
    return parser


def main(argv=None):
    """Run the ``lanqr`` shell command.

    Parameters
    ----------
    argv : list of str, optional
        The arguments after the program name; ``sys.argv[1:]`` when omitted.

    Returns
    -------
    int
        Exit status: 0 done; 2 bad input or options (one line on stderr);
        3 an incomplete answer (unconverged pairs, a failed inertia check or
        a count that could not be certified).

    Raises
    ------
    SystemExit
        Only from argument parsing (``--help``, ``--version``, unknown
        options: status 2), as :mod:`argparse` does.

    Notes
    -----
    Input problems are raised internally as ``InputProblem`` and printed as
    ``lanqr COMMAND: message``; no traceback reaches the user for them.

    Examples
    --------
    >>> main(["count", "no-such-file.mtx", "--below", "1"])  # doctest: +SKIP
    lanqr count: matrix: no-such-file.mtx: no such file
    2
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return EXIT_OK
    try:
        return args.func(args)
    except InputProblem as exc:
        print(f"lanqr {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except IncompleteAnswer as exc:
        print(f"lanqr {args.command}: {exc}", file=sys.stderr)
        return EXIT_INCOMPLETE
    except BrokenPipeError:
        # The reader (e.g. `| head`) went away: stop quietly, like other shell tools.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 1
    except KeyboardInterrupt:
        print(f"\nlanqr {args.command}: interrupted", file=sys.stderr)
        return 130

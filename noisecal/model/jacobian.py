"""Jacobians of a nonlinear model by complex step, checked against finite differences.

A Python model file defines ``f(x, u, w, dt)`` (the state one step later, shape (n,))
and ``h(x, v)`` (the measurement, shape (m,)). At an operating point (x0, u0, w = 0,
v = 0) the filter's four Jacobians are

    F = ∂f/∂x,  L = ∂f/∂w,  H = ∂h/∂x,  M = ∂h/∂v,

taken by the complex step ∂g/∂x_j = Im g(x + i·h·e_j) / h, exact to rounding for an
analytic g at any small h (no subtractive cancellation), and checked against
central differences. A function that does not take complex numbers (``math.sin``,
``abs``, ``np.real``) falls back to central differences, with a note.

References
----------
W. Squire, G. Trapp, "Using complex variables to estimate derivatives of real
functions", SIAM Review 40(1), 110–112, 1998. J. R. R. A. Martins, P. Sturdza,
J. J. Alonso, "The complex-step derivative approximation", ACM TOMS 29(3), 2003.
"""

from __future__ import annotations

import importlib.util
import sys
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError

STEP = 1e-20
"""Complex step (relative to 1): far below rounding of the real part, so exact."""


@dataclass(frozen=True)
class Jacobian:
    """One Jacobian with how it was taken.

    Attributes
    ----------
    J : ndarray, shape (rows, cols)
    method : str
        ``"complex step"`` or ``"central differences"``.
    fd_max_difference : float
        Largest |complex step − central differences| over the entries (0 for the
        central differences themselves).
    scale : float
        Largest |J| entry (for reading the difference).
    """

    J: np.ndarray
    method: str
    fd_max_difference: float
    scale: float


def central_difference(fun, x0: np.ndarray) -> np.ndarray:
    """Jacobian of ``fun`` at ``x0`` by central differences (step ∝ eps^(1/3)).

    Parameters
    ----------
    fun : callable, shape (k,) → shape (r,)
    x0 : ndarray, shape (k,)

    Returns
    -------
    ndarray, shape (r, k)
    """
    x0 = np.asarray(x0, float)
    cols = []
    for j in range(x0.shape[0]):
        h = 6.0e-6 * max(1.0, abs(x0[j]))
        e = np.zeros_like(x0)
        e[j] = h
        cols.append((np.asarray(fun(x0 + e), float) - np.asarray(fun(x0 - e), float)) / (2 * h))
    return np.column_stack(cols) if cols else np.zeros((len(np.atleast_1d(fun(x0))), 0))


def complex_step(fun, x0: np.ndarray) -> np.ndarray:
    """Jacobian of ``fun`` at ``x0`` by the complex step.

    Parameters
    ----------
    fun : callable taking a complex array, shape (k,) → shape (r,)
    x0 : ndarray, shape (k,)

    Returns
    -------
    ndarray, shape (r, k)

    References
    ----------
    Squire & Trapp (1998).
    """
    x0 = np.asarray(x0, float)
    cols = []
    for j in range(x0.shape[0]):
        x = x0.astype(complex)
        x[j] += 1j * STEP
        cols.append(np.imag(np.asarray(fun(x), dtype=complex)) / STEP)
    return np.column_stack(cols) if cols else np.zeros((len(np.atleast_1d(fun(x0))), 0))


def checked(fun, x0: np.ndarray, where: str, rtol: float = 1e-5) -> Jacobian:
    """The complex-step Jacobian, checked against central differences.

    Raises
    ------
    InputError
        The two disagree (the function is not analytic in that argument, e.g. it
        takes ``abs`` or branches on a value), or the function fails or returns
        values that are not finite.
    """
    try:
        fd = central_difference(fun, x0)
    except InputError:
        raise
    except Exception as exc:  # the user's code: any failure is theirs to fix
        raise InputError(f"{where}: the model function failed ({type(exc).__name__}: "
                         f"{str(exc).splitlines()[0] if str(exc) else ''}); fix the model "
                         "file") from None
    if not np.all(np.isfinite(fd)):
        raise InputError(f"{where}: the model function gives values that are not finite "
                         "near the operating point; check it and the operating point")
    scale = float(np.abs(fd).max()) if fd.size else 0.0
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", np.exceptions.ComplexWarning)
            cs = complex_step(fun, x0)
    except Exception:
        return Jacobian(fd, "central differences (the function does not take complex "
                        "numbers, so no complex step)", 0.0, scale)
    diff = float(np.abs(cs - fd).max()) if fd.size else 0.0
    if diff > rtol * max(scale, 1e-300) + 1e-9 * max(scale, 1.0):
        raise InputError(f"{where}: complex-step and finite-difference Jacobians differ by "
                         f"{diff:.3g} (largest entry {scale:.3g}); the function is not smooth "
                         "at the operating point (abs, a branch, rounding?); make it smooth "
                         "there or choose another point")
    return Jacobian(cs, "complex step", diff, scale)


def load_python(path: str) -> tuple:
    """``f`` and ``h`` of a Python model file.

    Raises
    ------
    InputError
        Missing file, an error on import, or f/h missing or not callable.
    """
    p = Path(path)
    if not p.is_file():
        raise InputError(f"{p}: no such Python model file; check the model's python: entry")
    name = f"noisecal_user_model_{abs(hash(str(p.resolve())))}"
    spec = importlib.util.spec_from_file_location(name, p)
    if spec is None or spec.loader is None:
        raise InputError(f"{p}: cannot be loaded as Python; give a .py file")
    module = importlib.util.module_from_spec(spec)
    try:
        spec.loader.exec_module(module)
    except Exception as exc:
        raise InputError(f"{p}: the Python model failed on import ({type(exc).__name__}: "
                         f"{str(exc).splitlines()[0] if str(exc) else ''}); fix it") from None
    finally:
        sys.modules.pop(name, None)
    for fn in ("f", "h"):
        if not callable(getattr(module, fn, None)):
            raise InputError(f"{p}: defines no function {fn}; a Python model defines "
                             "f(x, u, w, dt) and h(x, v)")
    return module.f, module.h


def model_jacobians(f, h, x0: np.ndarray, u0: np.ndarray, n_w: int, n_v: int,
                    dt: float, where: str) -> dict:
    """The four Jacobians F, L, H, M of a nonlinear model at an operating point.

    Parameters
    ----------
    f : callable
        ``f(x, u, w, dt)``: the state one step later, shape (n,).
    h : callable
        ``h(x, v)``: the measurement, shape (m,).
    x0 : ndarray, shape (n,)
    u0 : ndarray, shape (k,)
    n_w, n_v : int
        Number of process and measurement noise components.
    dt : float
        Step, s.
    where : str
        The file, for messages.

    Returns
    -------
    dict of str to Jacobian
        ``F`` (n, n), ``L`` (n, n_w), ``H`` (m, n), ``M`` (m, n_v).
    """
    w0, v0 = np.zeros(n_w), np.zeros(n_v)

    def shape_checked(fun, size, what):
        def g(z):
            out = np.asarray(fun(z)).reshape(-1)
            if out.shape[0] != size:
                raise InputError(f"{where}: {what} returns {out.shape[0]} values; expected "
                                 f"{size}")
            return out
        return g

    n = x0.shape[0]
    try:
        m = np.asarray(h(x0, v0)).reshape(-1).shape[0]
    except Exception as exc:
        raise InputError(f"{where}: h(x, v) failed at the operating point "
                         f"({type(exc).__name__}); fix the model file") from None
    if m != n_v:
        raise InputError(f"{where}: h returns {m} values but the model file lists {n_v} "
                         "measurements; list one per component of h")
    fx = shape_checked(lambda x: f(x, u0, w0, dt), n, "f")
    fw = shape_checked(lambda w: f(x0, u0, w, dt), n, "f")
    hx = shape_checked(lambda x: h(x, v0), m, "h")
    hv = shape_checked(lambda v: h(x0, v), m, "h")
    return {"F": checked(fx, x0, f"{where}: df/dx"), "L": checked(fw, w0, f"{where}: df/dw"),
            "H": checked(hx, x0, f"{where}: dh/dx"), "M": checked(hv, v0, f"{where}: dh/dv")}


def along(f, h, X: np.ndarray, U: np.ndarray, n_w: int, n_v: int, dt: float, where: str,
          checks: int = 5):
    """The four Jacobians at every row of a trajectory.

    Each Jacobian is checked against central differences (:func:`checked`) at
    ``checks`` rows spread over the trajectory; the method that passed there (complex
    step, or central differences for a function without complex support) is used at
    every row.

    Parameters
    ----------
    X : ndarray, shape (K, n)
        States along the trajectory.
    U : ndarray, shape (K, k)
        Inputs (k may be 0).
    checks : int
        Rows checked against central differences.

    Returns
    -------
    J : dict of str to ndarray
        ``F`` (K, n, n), ``L`` (K, n, n_w), ``H`` (K, m, n), ``M`` (K, m, n_v).
    checked_rows : dict of str to Jacobian
        The check at the row with the largest difference, per Jacobian.
    """
    K = X.shape[0]
    rows = np.unique(np.linspace(0, K - 1, min(checks, K)).round().astype(int))
    worst: dict = {}
    for i in rows:
        jac = model_jacobians(f, h, X[i], U[i], n_w, n_v, dt, f"{where} (row {i})")
        for k, v in jac.items():
            if k not in worst or v.fd_max_difference >= worst[k].fd_max_difference:
                worst[k] = v
    use_cs = {k: v.method == "complex step" for k, v in worst.items()}
    w0, v0 = np.zeros(n_w), np.zeros(n_v)
    out = {"F": [], "L": [], "H": [], "M": []}
    for i in range(K):
        x0, u0 = X[i], U[i]
        funs = {"F": (lambda x: np.asarray(f(x, u0, w0, dt)).reshape(-1), x0),
                "L": (lambda w: np.asarray(f(x0, u0, w, dt)).reshape(-1), w0),
                "H": (lambda x: np.asarray(h(x, v0)).reshape(-1), x0),
                "M": (lambda v: np.asarray(h(x0, v)).reshape(-1), v0)}
        for k, (fun, at) in funs.items():
            try:
                out[k].append(complex_step(fun, at) if use_cs[k] else
                              central_difference(fun, at))
            except Exception as exc:
                raise InputError(f"{where}: the model function failed at trajectory row {i} "
                                 f"({type(exc).__name__}); check the model and that row") \
                    from None
    J = {k: np.array(v) for k, v in out.items()}
    for k, v in J.items():
        if not np.all(np.isfinite(v)):
            bad = int(np.flatnonzero(~np.isfinite(v).reshape(K, -1).all(axis=1))[0])
            raise InputError(f"{where}: {k} is not finite at trajectory row {bad}; check the "
                             "model there")
    return J, worst

"""Semi-iterative methods on least squares: Brakhage's nu-method.

The nu-method is Landweber's iteration (``gd``) accelerated by a fixed three-term
recurrence. With ``A^T A = (s / L) X^T X / n`` (eigenvalues in ``(0, 1]`` for
``step_scale = s <= 1``) and ``k = 1, 2, ...`` the number of the step being taken::

    w_k = w_{k-1} + mu_k (w_{k-1} - w_{k-2}) - omega_k (s / L) grad f(w_{k-1}),   w_0 = w_{-1} = 0

    mu_k    = (k - 1)(2k - 3)(2k + 2nu - 1) / ((k + 2nu - 1)(2k + 4nu - 1)(2k + 2nu - 3))   (mu_1 = 0)
    omega_k = 4 (2k + 2nu - 1)(k + nu - 1) / ((k + 2nu - 1)(2k + 4nu - 1))

(Brakhage 1987; Hanke, Numer. Math. 60, 1991; Engl, Hanke and Neubauer, Regularization
of Inverse Problems, 1996, Section 6.3). Each step costs one gradient: one data pass.
From zero the iterate is a spectral filter of the minimum-norm solution: for each
eigenvalue ``lambda`` of ``A^T A`` the component is multiplied by ``1 - r_k(lambda)``,
where the residual polynomial is the normalized Jacobi polynomial

    r_k(lambda) = P_k^(a, b)(1 - 2 lambda) / P_k^(a, b)(1),   a = 2 nu - 1/2,  b = -1/2.

``nu > 0`` sets the method's qualification (how smooth a solution it can still profit
from; Engl, Hanke and Neubauer, Section 6.3). Near ``lambda = 0`` the residual polynomial
falls like ``1 - c k^2 lambda`` where Landweber's ``(1 - lambda)^k`` falls like
``1 - k lambda``, so the nu-method reaches a given filter level in about the square root
of Landweber's iteration count.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from stopwise.core.params import Interval, param
from stopwise.problem.problem import TrainingSet
from stopwise.solvers.base import SolverDef, State, frozen, register, step_size


@dataclass(frozen=True)
class NuParams:
    nu: float = param(1.0, Interval(0.0, None, low_closed=False),
                      "qualification nu > 0 of the method (Jacobi parameters a = 2 nu - 1/2, b = -1/2)")
    step_scale: float = param(1.0, Interval(0.0, 1.0, low_closed=False),
                              "operator scaling in units of 1/L: A^T A = (step_scale / L) X^T X / n must have "
                              "its eigenvalues in (0, 1], so step_scale <= 1")


@dataclass(frozen=True)
class NuState(State):
    w_prev: np.ndarray | None = None


def nu_coefficients(k: int, nu: float) -> tuple[float, float]:
    """``(mu_k, omega_k)`` of step ``k >= 1`` (module docstring).

    >>> nu_coefficients(1, 1.0)          # omega_1 = (4 nu + 2) / (4 nu + 1)
    (0.0, 1.2)
    >>> [round(c, 12) for c in nu_coefficients(2, 1.0)]   # 5/63 and 40/21
    [0.079365079365, 1.904761904762]
    """
    if k == 1:
        return 0.0, (4.0 * nu + 2.0) / (4.0 * nu + 1.0)
    mu = ((k - 1) * (2 * k - 3) * (2 * k + 2 * nu - 1)
          / ((k + 2 * nu - 1) * (2 * k + 4 * nu - 1) * (2 * k + 2 * nu - 3)))
    omega = 4.0 * (2 * k + 2 * nu - 1) * (k + nu - 1) / ((k + 2 * nu - 1) * (2 * k + 4 * nu - 1))
    return float(mu), float(omega)


def nu_init(train: TrainingSet, params: NuParams, rng) -> NuState:
    w = frozen(np.zeros(train.dim))
    return NuState(w=w, iteration=0, passes=0.0, w_prev=w)


def nu_step(train: TrainingSet, params: NuParams, state: NuState) -> NuState:
    """One step of the nu-method's three-term recurrence (module docstring).

    >>> tr = TrainingSet(np.eye(2), np.array([1.0, 2.0]), L=1.0)
    >>> p = NuParams(nu=1.0)
    >>> s = nu_step(tr, p, nu_init(tr, p, None))
    >>> [round(v, 12) for v in s.w.tolist()]      # omega_1 (1/L) X^T y / n with n = 2
    [0.6, 1.2]
    """
    k = state.iteration + 1
    mu, omega = nu_coefficients(k, params.nu)
    g = train.gradient(state.w)
    g *= -omega * step_size(train, params.step_scale)
    g += state.w
    if mu:
        d = state.w - state.w_prev
        d *= mu
        g += d
    return NuState(w=frozen(g), iteration=k, passes=state.passes + 1.0, w_prev=state.w)


register(SolverDef("nu_method", NuParams, nu_init, nu_step,
                   "Brakhage's nu-method: Landweber accelerated by a fixed three-term recurrence "
                   "(residual polynomials are normalized Jacobi polynomials)"))

"""The credibility penalty of the GLM baselines: each factor's level coefficients shrunk towards its base.

Random-effects view of a GLM with treatment coding: the log relativity beta_fj of each estimated
non-base level j of factor f is drawn independently from N(0, tau_f^2), tau_f^2 the between-level
variance of the factor's log relativities; the intercept has a flat prior. With dispersion phi the
log posterior is -(D(beta) + sum_f lambda_f ||beta_f||^2) / (2 phi) + const, D the deviance and

    lambda_f = phi / tau_f^2,

so the ridge fit of `engines.newton_fit` is the posterior mode and phi (X'WX + Lambda)^-1 the
posterior covariance (Laplace approximation). A level with little exposure keeps little of its own
experience and sits near the base, its complement; a level without claims no longer runs to zero.

tau_f^2 is chosen by the data (empirical Bayes, the credibility choice): at each Newton step it
maximises the marginal likelihood of the Gaussian working model (X'WX, X'Wz; the Laplace
approximation of the random-effects GLM's, penalised quasi-likelihood). Its stationarity condition
is the EM update

    tau_f^2 = (||beta_f||^2 + phi tr S_ff) / J_f,   S = (X'WX + Lambda)^-1,

J_f the factor's estimated non-base levels, beta = S X'Wz; it is iterated in MacKay's equivalent
form tau_f^2 = ||beta_f||^2 / gamma_f, gamma_f = J_f - lambda_f tr S_ff (the same fixed points,
reached in fewer iterations). A factor with fewer than MIN_LEVELS estimated non-base levels is left
unpenalised: with fewer values the between-level variance cannot be estimated, and shrinkage pays
(Stein) from three means on.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial

import numpy as np
import scipy.linalg

from premiumlab.models.glm.engines import EngineFit, OneHotDesign, RidgeRule, WorkingModel

PENALTIES = ("credibility", "none")
MIN_LEVELS = 3
TAU2_START = 1.0
TAU2_FLOOR = 1e-8
TAU2_CEILING = 1e2
PENALTY_TOLERANCE = 1e-7
MAX_PENALTY_ITERATIONS = 100
MAX_LOG_STEP = 4.0
EIGEN_FLOOR = 1e-8
STEP_HALVINGS = 30


@dataclass(frozen=True)
class PenaltyGroups:
    """The penalised factors and the positions of their estimated levels among the kept columns."""

    names: tuple[str, ...]
    positions: tuple[np.ndarray, ...]


def penalty_groups(design: OneHotDesign, kept: np.ndarray) -> PenaltyGroups:
    """The factors of `design` with at least MIN_LEVELS estimated non-base levels among `kept`.

    Parameters
    ----------
    design : OneHotDesign
        The design whose full-space columns `kept` indexes.
    kept : np.ndarray
        The estimated full-space columns (`engines.choose_columns`); base levels are never among them.

    Returns
    -------
    PenaltyGroups
        Per penalised factor (in design order), its name and the positions in `kept` of its columns.
    """
    names, positions = [], []
    for j, name in enumerate(design.factor_names):
        where = np.flatnonzero(np.isin(kept, design.columns_of(j)))
        if len(where) >= MIN_LEVELS:
            names.append(name)
            positions.append(where)
    return PenaltyGroups(tuple(names), tuple(positions))


def credibility_rule(groups: PenaltyGroups) -> RidgeRule:
    """The `engines.RidgeRule` that re-chooses the credibility ridge of `groups` (`credibility_ridge`).

    Parameters
    ----------
    groups : PenaltyGroups
        The penalised factors.

    Returns
    -------
    RidgeRule
        (working model, ridge) -> ridge.
    """
    return partial(credibility_ridge, groups)


def credibility_ridge(groups: PenaltyGroups, working: WorkingModel, ridge: np.ndarray) -> np.ndarray:
    """Ridge r_j = lambda_f = phi / tau_f^2 on the columns of each penalised factor f, tau_f^2 at the
    maximum of the working model's marginal likelihood (module docstring).

    With rho_f = log lambda_f, H = X'WX + Lambda, S = H^-1, beta = S X'Wz, minimises

        L(rho) = -(X'Wz)' beta / phi + log det H - sum_f J_f rho_f

    (-2 x the log marginal likelihood up to a constant) by Newton's method on rho with the exact
    gradient lambda_f (||beta_f||^2 / phi + tr S_ff) - J_f (zero: the EM fixed point) and Hessian
    diag(lambda_f a_f) - lambda_f lambda_g (2 beta_f' S_fg beta_g / phi + ||S_fg||_F^2), a_f the
    gradient's bracket; the Hessian's eigenvalues taken in absolute value and at least
    EIGEN_FLOOR (a descent direction where L is not convex), steps shortened to at most
    MAX_LOG_STEP in any rho_f and halved while L rises, tau_f^2 is held within [TAU2_FLOOR,
    TAU2_CEILING]. phi = `WorkingModel.dispersion` at the starting penalty. Stops when no rho_f
    moves by more than PENALTY_TOLERANCE (at most MAX_PENALTY_ITERATIONS steps).

    Parameters
    ----------
    groups : PenaltyGroups
        The penalised factors.
    working : WorkingModel
        X'WX, X'Wz and the dispersion of the Newton step's working model.
    ridge : np.ndarray
        The current ridge per column (0 on columns not penalised: they start at tau^2 = TAU2_START).

    Returns
    -------
    np.ndarray
        The new ridge per column: lambda_f on factor f's columns, 0 elsewhere.
    """
    size = len(working.right)
    member = np.zeros((size, len(groups.positions)))
    for f, positions in enumerate(groups.positions):
        member[positions, f] = 1.0
    current = member.T @ ridge / member.sum(axis=0)
    dispersion = working.dispersion(size - float(ridge @ np.diag(_inverse(working.gram + np.diag(ridge)))))
    low, high = np.log(dispersion / TAU2_CEILING), np.log(dispersion / TAU2_FLOOR)
    rho = np.clip(np.log(np.where(current > 0, current, dispersion / TAU2_START)), low, high)
    here = _Marginal(working, member, rho, dispersion)
    for _ in range(MAX_PENALTY_ITERATIONS):
        gradient, hessian = here.gradient, here.hessian
        free = ~(((rho >= high) & (gradient < 0)) | ((rho <= low) & (gradient > 0)))
        step = np.zeros(len(rho))
        if free.any():
            values, vectors = np.linalg.eigh(hessian[np.ix_(free, free)])
            values = np.maximum(np.abs(values), EIGEN_FLOOR)
            step[free] = -vectors @ ((vectors.T @ gradient[free]) / values)
        step *= min(1.0, MAX_LOG_STEP / max(float(np.max(np.abs(step))), 1e-300))
        for _ in range(STEP_HALVINGS):
            trial = _Marginal(working, member, np.clip(rho + step, low, high), dispersion)
            if trial.value <= here.value + 1e-12 * abs(here.value):
                break
            step = step / 2
        moved = float(np.max(np.abs(trial.rho - rho)))
        rho, here = trial.rho, trial
        if moved < PENALTY_TOLERANCE:
            break
    return member @ np.exp(rho)


def _inverse(matrix: np.ndarray) -> np.ndarray:
    """The inverse of a symmetric positive definite matrix, by its Cholesky factor."""
    return scipy.linalg.cho_solve(scipy.linalg.cho_factor(matrix), np.eye(len(matrix)))


class _Marginal:
    """-2 log marginal likelihood of the working model at log penalties rho, with its derivatives."""

    def __init__(self, working: WorkingModel, member: np.ndarray, rho: np.ndarray, dispersion: float) -> None:
        self.rho, self.member, self.dispersion = rho, member, dispersion
        self.penalty = np.exp(rho)
        ridge = member @ self.penalty
        factor = scipy.linalg.cho_factor(working.gram + np.diag(ridge))
        self.beta = scipy.linalg.cho_solve(factor, working.right)
        self.inverse = scipy.linalg.cho_solve(factor, np.eye(len(ridge)))
        log_det = 2.0 * float(np.sum(np.log(np.diag(factor[0]))))
        self.value = -float(working.right @ self.beta) / dispersion + log_det - float(member.sum(axis=0) @ rho)

    @property
    def bracket(self) -> np.ndarray:
        """a_f = ||beta_f||^2 / phi + tr S_ff."""
        return self.member.T @ (self.beta**2) / self.dispersion + self.member.T @ np.diag(self.inverse)

    @property
    def gradient(self) -> np.ndarray:
        return self.penalty * self.bracket - self.member.sum(axis=0)

    @property
    def hessian(self) -> np.ndarray:
        spread = self.member * self.beta[:, None]
        cross = 2.0 * spread.T @ self.inverse @ spread / self.dispersion + self.member.T @ self.inverse**2 @ self.member
        return np.diag(self.penalty * self.bracket) - np.outer(self.penalty, self.penalty) * cross


@dataclass(frozen=True)
class FactorCredibility:
    """A penalised factor: its penalty lambda_f, between-level sd tau_f (log scale) and levels J_f."""

    penalty: float
    tau: float
    levels: int


def factor_credibility(groups: PenaltyGroups, fit: EngineFit, dispersion: float) -> dict[str, FactorCredibility]:
    """Per penalised factor, lambda_f, tau_f = sqrt(phi / lambda_f) and J_f of a fit.

    Parameters
    ----------
    groups : PenaltyGroups
        The penalised factors.
    fit : EngineFit
        The penalised fit (its `ridge`).
    dispersion : float
        phi of the fit.

    Returns
    -------
    dict[str, FactorCredibility]
        By factor name, in design order.
    """
    return {
        name: FactorCredibility(float(fit.ridge[p[0]]), float(np.sqrt(dispersion / fit.ridge[p[0]])), len(p))
        for name, p in zip(groups.names, groups.positions)
    }

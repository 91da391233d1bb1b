"""Given the factors: conditional default probabilities and the cumulant of the loss.

Given X (and W under the t copula) the groups' default counts are independent binomials with
probability p_g = Phi((c_g sqrt(W/df) - b_g . Z) / s_g), held in log space (log_ndtr) so that
probabilities of 1e-300 and 1 - 1e-17 stay exact. The conditional cumulant of the loss is
psi(theta) = sum_g n_g log(1 - p_g + p_g M_g(theta e_g)), M_g the LGD's moment generating
function; Glasserman and Li (2005) twist by the theta solving psi'(theta) = x.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from core.credit.lgd import MAX_TILT, BetaLGD, FixedLGD
from core.credit.model import CreditModel

_NEWTON_STEPS = 60
_TOL = 1e-10


@dataclass(frozen=True)
class Conditional:
    """log p and log(1 - p), shape (m, G), for m factor draws."""

    log_p: np.ndarray
    log_q: np.ndarray  # log(1 - p)


def conditional_pd(model: CreditModel, x: np.ndarray, w: np.ndarray | None) -> Conditional:
    """x: (m, k) independent factors; w: (m,) chi-square mixing variable (t copula) or None."""
    c = model.thresholds[None, :]
    if w is not None:
        c = c * np.sqrt(np.asarray(w, dtype=float) / float(model.df or 1.0))[:, None]
    u = (c - x @ model.loadings_x.T) / model.residual_sd[None, :]
    return Conditional(special.log_ndtr(u), special.log_ndtr(-u))


class LgdTables:
    """Per group: log M, tilted mean and tilted variance of the LGD as functions of the tilt t.

    Exact for fixed LGDs. For beta LGDs the root finding uses tables on a grid (np.interp), as
    theta only has to be near the root: the likelihood ratio is always evaluated exactly
    (`log_mgf_exact`) at whatever theta is used."""

    def __init__(self, model: CreditModel) -> None:
        self.model = model
        self.fixed = np.array([lg.fraction if isinstance(lg, FixedLGD) else np.nan
                               for lg in model.lgds])
        self.grid = MAX_TILT * np.linspace(0.0, 1.0, 4097) ** 2
        self.tables: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        for g, lg in enumerate(model.lgds):
            if isinstance(lg, BetaLGD):
                self.tables[g] = (lg.log_mgf(self.grid), lg.tilted_mean(self.grid),
                                  lg.tilted_variance(self.grid))

    def approx(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(log M, mean, variance) at tilts t of shape (m, G)."""
        log_m = np.asarray(t * self.fixed[None, :], dtype=float)
        mean = np.broadcast_to(self.fixed[None, :], t.shape).copy()
        var = np.zeros_like(t)
        for g, (lm, mu, v) in self.tables.items():
            log_m[:, g] = np.interp(t[:, g], self.grid, lm)
            mean[:, g] = np.interp(t[:, g], self.grid, mu)
            var[:, g] = np.interp(t[:, g], self.grid, v)
        return log_m, mean, var

    def log_mgf_exact(self, t: np.ndarray) -> np.ndarray:
        out = np.asarray(t * self.fixed[None, :], dtype=float)
        for g, lg in enumerate(self.model.lgds):
            if isinstance(lg, BetaLGD):
                out[:, g] = lg.log_mgf(t[:, g])
        return out


def psi(cond: Conditional, counts: np.ndarray, log_m: np.ndarray) -> np.ndarray:
    """psi per sample: sum_g n_g log(1 - p_g + p_g M_g), in log space."""
    terms = np.logaddexp(cond.log_q, cond.log_p + log_m) * counts[None, :]
    return np.asarray(terms.sum(axis=1), dtype=float)


def theta_max(model: CreditModel) -> float:
    return MAX_TILT / float(model.exposures.max())


def solve_theta(model: CreditModel, tables: LgdTables, cond: Conditional,
                threshold: float) -> np.ndarray:
    """Per sample the theta >= 0 with psi'(theta) = threshold (0 where the conditional mean
    loss already exceeds it; the cap theta_max where the root lies beyond it). Safeguarded
    Newton: a step leaving the bracket [lo, hi] is replaced by bisection."""
    m = cond.log_p.shape[0]
    n, e = model.counts[None, :].astype(float), model.exposures[None, :]
    lo, hi = np.zeros(m), np.full(m, theta_max(model))
    theta = np.zeros(m)
    active = np.ones(m, dtype=bool)
    for step in range(_NEWTON_STEPS):
        if not active.any():
            break
        th = theta[active]
        t = th[:, None] * e
        log_m, mu, var = tables.approx(t)
        lp, lq = cond.log_p[active], cond.log_q[active]
        log_tw = lp + log_m - np.logaddexp(lq, lp + log_m)  # log of the twisted PD
        q = np.exp(log_tw)
        d1 = (n * e * q * mu).sum(axis=1) - threshold
        d2 = (n * e * e * (q * var + q * (1.0 - q) * mu * mu)).sum(axis=1)
        if step == 0:
            done0 = d1 >= 0.0  # no twist needed
            idx = np.flatnonzero(active)
            theta[idx[done0]] = 0.0
            active[idx[done0]] = False
            keep = ~done0
            th, d1, d2 = th[keep], d1[keep], d2[keep]
            if not active.any():
                break
        idx = np.flatnonzero(active)
        lo[idx] = np.where(d1 < 0, th, lo[idx])
        hi[idx] = np.where(d1 > 0, th, hi[idx])
        with np.errstate(divide="ignore", invalid="ignore"):
            nxt = th - d1 / d2
        bad = ~np.isfinite(nxt) | (nxt <= lo[idx]) | (nxt >= hi[idx])
        nxt = np.where(bad, 0.5 * (lo[idx] + hi[idx]), nxt)
        theta[idx] = nxt
        conv = ((np.abs(d1) <= _TOL * max(threshold, 1e-300))
                | (hi[idx] - lo[idx] <= 1e-12 * hi[idx]))
        active[idx[conv]] = False
    return theta

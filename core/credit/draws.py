"""Drawing blocks of a credit portfolio: the model itself, or a mixture of Glasserman-Li
proposals with the model as a defensive component.

A proposal component l moves the independent factors to N(mu_l, I), draws the t copula's
mixing variable W from a gamma law of shape k_l (the chi-square's scale kept), and given the
factors twists the loss by e^{theta_l L - psi(theta_l)}, theta_l solving psi' = x_l: the
default counts become binomial with the twisted probability p M / (1 - p + p M) and each
default's LGD follows the tilted law e^{t u} f(u) / M(t), t = theta_l e. This joint tilt of
(counts, LGDs) has density ratio exactly e^{theta L - psi(theta)}, so the mixture's
likelihood ratio f / sum_l a_l g_l (Veach and Guibas's balance heuristic; the defensive share,
Hesterberg 1995, caps it at 1 / a_0) needs only each sample's factors, W and loss.
Counts are binomial per group, so the cost of a sample does not grow with the obligor count
when LGDs are fixed; with beta LGDs one tilted beta is drawn per default.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from core.credit.conditional import Conditional, LgdTables, conditional_pd, psi, solve_theta
from core.credit.lgd import BetaLGD
from core.credit.model import CreditModel
from core.credit.shift import Shift
from core.errors import LimitError

# Defaults drawn per block with beta LGDs are kept below this (one beta draw each).
MAX_DEFAULTS_PER_BLOCK = 1 << 25


@dataclass(frozen=True)
class Component:
    """One Glasserman-Li proposal: the threshold it is twisted for, and where it moves the
    factors and the mixing variable (w_shape None: W from its own law)."""

    threshold: float
    shift: Shift
    w_shape: float | None
    # Mixed books: a mean shift of the claim lines' own normals (None: from the model).
    eps_shift: np.ndarray | None = None


@dataclass
class CreditDraw:
    total: np.ndarray  # (m,) portfolio loss (claim lines at their lattice midpoints)
    group_loss: np.ndarray  # (m, G + L): the groups' losses, then the claim lines'
    log_lr: np.ndarray  # (m,) log f/g of the whole sample (0 for the model itself)
    total_lo: np.ndarray | None = None  # (m,) with the lines' lower / upper lattice
    total_hi: np.ndarray | None = None  # quantiles (None without claim lines)


def w_shape_for(model: CreditModel, shift: Shift) -> float | None:
    """Gamma shape whose mean 2 k matches the searched-for W (never above df / 2: a W larger
    than typical needs no help). The gamma keeps the chi-square's scale, so the ratio
    f/g ~ w^{df/2 - k} stays bounded where W is small and has a finite second moment."""
    if model.copula != "student_t" or shift.w_star is None:
        return None
    nu = float(model.df or 1.0)
    return float(min(0.5 * nu, max(0.05, 0.5 * shift.w_star)))


def _log_w_ratio(model: CreditModel, shape: float, w: np.ndarray) -> np.ndarray:
    """log g/f of the mixing variable: gamma(shape, scale 2) over chi-square(df)."""
    half = 0.5 * float(model.df or 1.0)
    out = ((shape - half) * np.log(w) + special.gammaln(half) - special.gammaln(shape)
           + (half - shape) * math.log(2.0))
    return np.asarray(out, dtype=float)


def _draw_losses(model: CreditModel, tables: LgdTables, cond: Conditional, theta: np.ndarray,
                 rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Twisted group losses (m, G) and the exact log M at the twist (m, G)."""
    e = model.exposures[None, :]
    t = theta[:, None] * e
    log_m = tables.log_mgf_exact(t)
    log_tw = cond.log_p + log_m - np.logaddexp(cond.log_q, cond.log_p + log_m)
    defaults = rng.binomial(model.counts[None, :], np.exp(log_tw))
    loss = np.empty(defaults.shape)
    for g, lg in enumerate(model.lgds):
        d = defaults[:, g]
        if not isinstance(lg, BetaLGD):
            loss[:, g] = model.exposures[g] * lg.fraction * d
            continue
        total = int(d.sum())
        if total > MAX_DEFAULTS_PER_BLOCK:
            raise LimitError("obligors", f"{total:,} defaults with a beta loss given default in "
                             f"one block (limit {MAX_DEFAULTS_PER_BLOCK:,}): too many obligors "
                             "for a random LGD; give a fixed LGD")
        u = lg.sample_tilted(np.repeat(t[:, g], d), rng)
        seg = np.repeat(np.arange(d.size), d)
        loss[:, g] = model.exposures[g] * np.bincount(seg, weights=u, minlength=d.size)
    return loss, log_m


class Sampler:
    """Draws from defensive * model + (1 - defensive) * mean of the components."""

    def __init__(self, model: CreditModel, components: list[Component],
                 defensive: float) -> None:
        self.model, self.components = model, components
        self.defensive = defensive if components else 1.0
        self.tables = LgdTables(model)
        n = len(components)
        self.weights = np.array([self.defensive] + [(1.0 - self.defensive) / max(n, 1)] * n)
        # Components twisted to the same threshold share one twist per sample (a mixed book's
        # per-line proposals do): each distinct threshold's root is solved once per block.
        targets = sorted({c.threshold for c in components})
        self.targets = np.array(targets, dtype=float)
        self.target_of = [targets.index(c.threshold) for c in components]

    def draw(self, m: int, rng: np.random.Generator) -> CreditDraw:
        model, k = self.model, self.model.factors
        which = np.repeat(np.arange(self.weights.size), rng.multinomial(m, self.weights))
        x = rng.standard_normal((m, k))
        w = None
        if model.copula == "student_t":
            nu = float(model.df or 1.0)
            w = rng.chisquare(nu, m)
        theta = np.zeros(m)
        for c, comp in enumerate(self.components, start=1):
            sel = which == c
            if not sel.any():
                continue
            x[sel] += comp.shift.mu[None, :]
            if w is not None and comp.w_shape is not None:
                w[sel] = 2.0 * rng.standard_gamma(comp.w_shape, int(sel.sum()))
        cond = conditional_pd(model, x, w)
        # The twist of every threshold at every sample: each sample's own (its component's)
        # draws the losses, all of them enter the mixture's likelihood ratio. The root is
        # solved sample by sample, so it is the same whichever rows are solved together.
        thetas = [solve_theta(model, self.tables, cond, t) for t in self.targets]
        for c in range(1, len(self.components) + 1):
            sel = which == c
            theta[sel] = thetas[self.target_of[c - 1]][sel]
        loss, _ = _draw_losses(model, self.tables, cond, theta, rng)
        credit = loss.sum(axis=1)
        lines = model.line_set
        if lines is None:
            return CreditDraw(credit, loss, self._log_lr(cond, x, w, credit, thetas))
        # Drawn last, so that a book without lines draws what it always drew.
        eps = rng.standard_normal((m, len(lines.lines)))
        for c, comp in enumerate(self.components, start=1):
            if comp.eps_shift is not None:
                eps[which == c] += comp.eps_shift[None, :]
        log_lr = self._log_lr(cond, x, w, credit, thetas, eps)
        ll = lines.losses(x, w, eps)
        return CreditDraw(credit + ll.mid.sum(axis=1), np.hstack([loss, ll.mid]), log_lr,
                          credit + ll.lo.sum(axis=1), credit + ll.hi.sum(axis=1))

    def _log_lr(self, cond: Conditional, x: np.ndarray, w: np.ndarray | None,
                total: np.ndarray, thetas: list[np.ndarray],
                eps: np.ndarray | None = None) -> np.ndarray:
        """-log sum_l a_l g_l/f at every sample (0 when drawing from the model only); total is
        the credit loss (the one the twist is of)."""
        m = total.size
        if not self.components:
            return np.zeros(m)
        counts = self.model.counts.astype(float)
        e = self.model.exposures[None, :]
        terms = [np.full(m, math.log(self.weights[0])) if self.weights[0] > 0
                 else np.full(m, -np.inf)]
        for c, comp in enumerate(self.components, start=1):
            mu = comp.shift.mu
            log_g = x @ mu - 0.5 * float(mu @ mu) if mu.size else np.zeros(m)
            if w is not None and comp.w_shape is not None:
                log_g = log_g + _log_w_ratio(self.model, comp.w_shape, w)
            if eps is not None and comp.eps_shift is not None:
                d = comp.eps_shift
                log_g = log_g + eps @ d - 0.5 * float(d @ d)
            # Every component's twist at this sample's factors.
            th = thetas[self.target_of[c - 1]]
            log_m = self.tables.log_mgf_exact(th[:, None] * e)
            log_g = log_g + th * total - psi(cond, counts, log_m)
            terms.append(math.log(self.weights[c]) + log_g)
        return np.asarray(-np.logaddexp.reduce(np.vstack(terms), axis=0), dtype=float)


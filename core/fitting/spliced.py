"""A spliced claim law: a lognormal or gamma body below a threshold u and a generalized
Pareto tail above it, and its maximum-likelihood fit.

    f(x) = w f_b(x) / F_b(u)          for x <= u
    f(x) = (1 - w) g(x - u)           for x > u

with g the generalized Pareto density (peaks over threshold: Pickands 1975, Balkema and de
Haan 1974; the splice as in Klugman, Panjer and Willmot, "Loss Models"). The threshold is
fixed by the caller (or a default quantile) and not estimated; w, the body and the tail
parameters are fitted jointly through the same truncated and censored likelihood as every
other family, starting from the separate fits that are exact without truncation or
censoring (w = share of claims at or below u).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy import special

from core.errors import ParameterError, TailgaugeError
from core.fitting import severity_fit
from core.fitting.data import ClaimData, Floats, check_for_family
from core.fitting.families import FAMILIES
from core.fitting.likelihood import objective
from core.fitting.mle import minimise
from core.fitting.model import Model
from core.fitting.results import Fit
from core.severities import GeneralizedPareto, Severity

BODIES = ("lognormal", "gamma")
MIN_TAIL = 10  # exceedances of the threshold a tail fit needs
MIN_BODY = 5
DEFAULT_TAIL_SHARE = 0.1  # common practice: about the largest 10% of claims form the tail


@dataclass(frozen=True, kw_only=True)
class Spliced(Severity):
    body: Severity
    threshold: float
    body_weight: float
    tail_law: GeneralizedPareto
    family: ClassVar[str] = "spliced"

    def __post_init__(self) -> None:
        if not (math.isfinite(self.threshold) and self.threshold > 0):
            raise ParameterError("threshold", f"must be finite and > 0, got {self.threshold}")
        if not 0.0 < self.body_weight < 1.0:
            raise ParameterError("body_weight", f"must be in (0, 1), got {self.body_weight}")
        if not self._log_body_mass > -math.inf:
            raise ParameterError("body", "puts no mass below the threshold")

    @property
    def tail(self) -> str:
        return self.tail_law.tail

    @property
    def support_max(self) -> float:
        return self.threshold + self.tail_law.support_max

    @property
    def cumulant_bound(self) -> float:
        return self.tail_law.cumulant_bound

    @functools.cached_property
    def _log_body_mass(self) -> float:
        return float(self.body.logcdf(self.threshold))

    def _logpdf(self, x: Floats) -> Floats:
        u, w = self.threshold, self.body_weight
        low = x <= u
        out = np.empty_like(x)
        # x in (0, u] lies inside the body's support: its private formula applies directly.
        out[low] = math.log(w) + self.body._logpdf(x[low]) - self._log_body_mass
        out[~low] = math.log1p(-w) + self.tail_law.logpdf(x[~low] - u)
        return out

    def _logsf(self, x: Floats) -> Floats:
        u, w = self.threshold, self.body_weight
        low = x <= u
        out = np.empty_like(x)
        share = np.exp(self.body._logcdf(x[low]) - self._log_body_mass)  # x in (0, u]
        out[low] = np.log1p(-w * np.minimum(share, 1.0))
        out[~low] = math.log1p(-w) + self.tail_law.logsf(x[~low] - u)
        return out

    def _isf_log(self, log_q: Floats) -> Floats:
        u, w = self.threshold, self.body_weight
        log_tail = math.log1p(-w)
        in_tail = log_q < log_tail
        out = np.empty_like(log_q)
        out[in_tail] = u + self.tail_law.isf_log(log_q[in_tail] - log_tail)
        # Body: w F_b(x) / F_b(u) = 1 - q.
        q = -special.expm1(log_q[~in_tail])
        out[~in_tail] = self.body.ppf(np.minimum(q / w, 1.0) * math.exp(self._log_body_mass))
        return out

    def _moment(self, k: int) -> float:
        # E X^k = w E[X^k | X <= u] + (1 - w) E[(u + Y)^k], Y the GPD excess (binomial sum
        # of its closed-form moments); the body's truncated moment is its limited moment
        # E[min(X, u)^k] less u^k P(X > u), both in closed form for lognormal and gamma.
        if self.tail_law.xi * k >= 1:
            return math.inf
        u, w = self.threshold, self.body_weight
        limited = float(self.body._limited(np.array([u]), k)[0])  # type: ignore[attr-defined]
        head = (limited - u**k * float(self.body.sf(u))) / math.exp(self._log_body_mass)
        tail = sum(math.comb(k, j) * u ** (k - j) * self.tail_law.moment(j) if j else u**k
                   for j in range(k + 1))
        return w * head + (1 - w) * tail


def default_threshold(x: Floats) -> float:
    """The empirical 90% quantile, lowered so that at least MIN_TAIL claims exceed it."""
    s = np.sort(x)
    exceed = max(math.ceil(DEFAULT_TAIL_SHARE * s.size), MIN_TAIL)
    if s.size <= exceed:
        return float(s[0])
    return float(s[s.size - exceed - 1])


def _names(body: str) -> tuple[str, ...]:
    return (*(f"body_{n}" for n in FAMILIES[body].names), "body_weight", "tail_xi",
            "tail_scale")


class _Map:
    """Free scale: the body's own, logit of w, xi as is, log of the tail scale."""

    def __init__(self, body: str, threshold: float) -> None:
        self.fam = FAMILIES[body]
        self.threshold = threshold

    def natural(self, z: Floats) -> Floats:
        k = self.fam.size
        return np.concatenate([self.fam.from_free(z[:k]),
                               [special.expit(z[k]), z[k + 1], math.exp(z[k + 2])]])

    def free(self, theta: Floats) -> Floats:
        k = self.fam.size
        return np.concatenate([self.fam.to_free(theta[:k]),
                               [special.logit(theta[k]), theta[k + 1], math.log(theta[k + 2])]])

    def jacobian(self, theta: Floats) -> Floats:
        k = self.fam.size
        w = theta[k]
        return np.concatenate([self.fam.jacobian(theta[:k]), [w * (1 - w), 1.0, theta[k + 2]]])

    def law(self, theta: Floats) -> Spliced:
        k = self.fam.size
        return Spliced(body=self.fam.severity(theta[:k]), threshold=self.threshold,
                       body_weight=float(theta[k]),
                       tail_law=GeneralizedPareto(xi=float(theta[k + 1]),
                                                  scale=float(theta[k + 2])))



def check_threshold(data: ClaimData, threshold: float, name: str) -> None:
    if data.threshold is not None and threshold <= data.threshold:
        raise ParameterError("tail_threshold", f"{threshold:g} must be above the "
                             f"reporting_threshold {data.threshold:g}")
    above = int(np.sum(data.x > threshold))
    below = data.n - above
    if above < MIN_TAIL or below < MIN_BODY:
        raise ParameterError("tail_threshold", f"{threshold:g} leaves {below} claims at or "
                             f"below it and {above} above; {name} needs at least {MIN_BODY} "
                             f"and {MIN_TAIL}")


def _start(body: str, data: ClaimData, threshold: float) -> Floats:
    """Separate fits of the two parts, exact for data without truncation or censoring: the
    body on the claims at or below u (truncated above at u), the tail on the exceedances."""
    x = data.exact
    low, high = x[x <= threshold], x[x > threshold] - threshold
    fam = FAMILIES[body]

    def body_nll(z: Floats) -> float:
        try:
            law = fam.severity(fam.from_free(z))
        except TailgaugeError:
            return math.inf
        with np.errstate(all="ignore"):
            value = -(float(np.sum(law.logpdf(low))) - low.size * float(law.logcdf(threshold)))
        return value if math.isfinite(value) else math.inf

    z_body = minimise(body_nll, fam.to_free(np.asarray(fam.start(low), dtype=float)),
                      polish=False)[0]
    tail = severity_fit.model("generalized_pareto")
    tail_data = ClaimData(x=high, censored=np.zeros(high.size, dtype=bool), threshold=None,
                          limits=np.full(high.size, math.inf))
    nll = objective(tail.build, tail_data)
    z_tail = minimise(nll, tail.free(tail.start(tail_data)), polish=False)[0]
    w = min(max(float(np.mean(data.x <= threshold)), 1e-3), 1 - 1e-3)
    return np.concatenate([fam.from_free(z_body), [w], tail.natural(z_tail)])


def model(body: str, threshold: float) -> Model:
    """The spliced law with a ``body`` family at a fixed ``threshold`` as a fittable model."""
    name = f"spliced_{body}"
    if body not in BODIES:
        raise ParameterError("families", f"a spliced body must be one of {', '.join(BODIES)}")
    mapping = _Map(body, threshold)

    def check(data: ClaimData) -> None:
        check_for_family(data, name, MIN_BODY + MIN_TAIL, True)
        check_threshold(data, threshold, name)

    return Model(name=name, names=_names(body), natural=mapping.natural, free=mapping.free,
                 jacobian=mapping.jacobian, law=mapping.law, check=check,
                 start=lambda data: _start(body, data, threshold), simplex=False)


def fit_spliced(body: str, data: ClaimData, threshold: float | None = None) -> Fit:
    """Joint maximum-likelihood fit of the spliced law with a ``body`` family."""
    u = default_threshold(data.x) if threshold is None else float(threshold)
    return model(body, u).fit(data)

"""Credit estimators as groups of thresholds sharing one sample stream (core.estimators.base).

- crude: the model itself, the indicator of L > x; one sample set for every threshold.
- glasserman_li: Glasserman and Li (2005) two-step importance sampling, one proposal per
  threshold (factor mean shift, W shape under the t copula, conditional twist), in a
  defensive mixture with the model.
"""

from __future__ import annotations

import numpy as np

from core.credit.draws import Component, Sampler, w_shape_for
from core.credit.model import CreditModel
from core.credit.shift import find_shift
from core.estimators.base import Group

CREDIT_METHODS = ("crude", "glasserman_li")
# Share of samples drawn from the model itself: caps the likelihood ratio at 1 / DEFENSIVE,
# so a region the proposal neglects (another factor direction, W not small) cannot hide.
DEFENSIVE = 0.1
_NEWTON_WORK = 8.0


def component(model: CreditModel, threshold: float) -> Component:
    shift = find_shift(model, threshold)
    return Component(float(threshold), shift, w_shape_for(model, shift))


def work(model: CreditModel, name: str, components: int = 1) -> float:
    """Deterministic cost proxy of one sample: normals and binomials per group and factor,
    times the Newton steps of every component's twist (beta LGDs: one draw per default)."""
    base = float(len(model.groups) + model.factors + 1)
    if not model.fixed_lgd:
        base += float(model.expected_defaults)
    if name == "crude":
        return base
    return base * (1.0 + _NEWTON_WORK * components)


def block_size(model: CreditModel) -> int:
    """Samples per block, from the model only (seeds stay tied to blocks): fixed LGDs cost a
    few numbers per group; beta LGDs one draw per default, so blocks shrink with the book."""
    if model.fixed_lgd:
        return 4096
    size = (1 << 20) / max(1.0, float(model.obligors))
    return int(min(4096, max(64, 2 ** int(np.floor(np.log2(max(size, 1.0)))))))


def plan(name: str, model: CreditModel, x: np.ndarray) -> list[Group]:
    if name == "crude":
        sampler = Sampler(model, [], 1.0)

        def crude_values(m: int, rng: np.random.Generator) -> np.ndarray:
            return (sampler.draw(m, rng).total[:, None] > x[None, :]).astype(float)

        return [Group(tuple(range(x.size)), crude_values, work(model, "crude"),
                      "indicator of L > x")]
    groups = []
    for i, xi in enumerate(x):
        groups.append(_twisted_group(model, i, float(xi)))
    return groups


def _twisted_group(model: CreditModel, i: int, x: float) -> Group:
    comp = component(model, x)
    sampler = Sampler(model, [comp], DEFENSIVE)
    xs = np.array([x])

    def values(m: int, rng: np.random.Generator) -> np.ndarray:
        d = sampler.draw(m, rng)
        return np.asarray((d.total[:, None] > xs[None, :]) * np.exp(d.log_lr)[:, None],
                          dtype=float)

    mu = ", ".join(f"{v:.3g}" for v in comp.shift.mu)
    detail = f"Glasserman-Li: factor shift [{mu}], conditional twist to {x:g}"
    if comp.w_shape is not None:
        detail += f", chi-square mixing variable from gamma shape {comp.w_shape:.3g}"
    return Group((i,), values, work(model, "glasserman_li"), detail)

"""The standard families as fittable models (see ``core.fitting.families``)."""

from __future__ import annotations

import numpy as np

from core.errors import ParameterError
from core.fitting.data import ClaimData, Floats, check_for_family
from core.fitting.families import FAMILIES, Family
from core.fitting.model import Model
from core.fitting.results import Fit


def _start(fam: Family, data: ClaimData) -> Floats:
    theta0 = np.asarray(fam.start(data.exact), dtype=float)
    if fam.name == "generalized_pareto" and theta0[0] < 0:
        # A negative shape bounds the support by scale / -xi: start with every claim inside.
        top = float(data.x.max())
        theta0[1] = max(theta0[1], -theta0[0] * top * 1.1)
    return theta0


def model(family: str) -> Model:
    if family not in FAMILIES:
        raise ParameterError("families", f"unknown family {family!r}; known: "
                             f"{', '.join(FAMILIES)}")
    fam = FAMILIES[family]

    def check(data: ClaimData) -> None:
        check_for_family(data, family, fam.min_claims, fam.positive_support)

    return Model(name=family, names=fam.names, natural=fam.from_free, free=fam.to_free,
                 jacobian=fam.jacobian, law=fam.severity, check=check,
                 start=lambda data: _start(fam, data))


def fit_severity(family: str, data: ClaimData) -> Fit:
    """Maximum-likelihood fit of one standard family."""
    return model(family).fit(data)

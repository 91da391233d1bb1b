"""Which fittable model a portfolio severity belongs to (for parameter risk). Kept apart from
core.fitting.model, which the per-family models import: this module imports them."""

from __future__ import annotations

import numpy as np

from core.errors import ParameterError
from core.fitting import severity_fit, spliced
from core.fitting.data import Floats
from core.fitting.families import FAMILIES
from core.fitting.model import Model
from core.severities import Severity


def model_of(severity: Severity) -> tuple[Model, Floats]:
    """The fittable model a severity belongs to and its natural parameter vector (in the
    order /v1/fit reports the covariance)."""
    if isinstance(severity, spliced.Spliced):
        body = severity.body
        names = FAMILIES[body.family].names
        theta = [*(float(getattr(body, n)) for n in names), severity.body_weight,
                 severity.tail_law.xi, severity.tail_law.scale]
        return spliced.model(body.family, severity.threshold), np.asarray(theta)
    if severity.family not in FAMILIES:
        raise ParameterError("severity", f"{severity.family} has no parameter model")
    fam = FAMILIES[severity.family]
    return severity_fit.model(fam.name), np.array([float(getattr(severity, n))
                                                   for n in fam.names])

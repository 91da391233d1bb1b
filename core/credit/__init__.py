"""Credit portfolios: homogeneous obligor groups on systematic factors (gaussian or t copula),
estimated by crude Monte Carlo or Glasserman-Li two-step importance sampling.

core.exceedance.exceedance and core.measures.tail_estimates accept a CreditModel and come
here; the functions below are the same entry points called directly.
"""

from core.credit.estimators import CREDIT_METHODS
from core.credit.exceedance import credit_exceedance
from core.credit.lgd import BetaLGD, FixedLGD
from core.credit.measures import credit_tail
from core.credit.model import COPULAS, CreditModel, ObligorGroup, group

__all__ = [
    "COPULAS",
    "CREDIT_METHODS",
    "BetaLGD",
    "CreditModel",
    "FixedLGD",
    "ObligorGroup",
    "credit_exceedance",
    "credit_tail",
    "group",
]

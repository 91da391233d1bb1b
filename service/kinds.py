"""The kinds of computation a request can ask for, by name: one code path for the HTTP
endpoints and for batch runs.

``KINDS[name].handle(request, settings, pool, metrics)`` computes exactly the body the
synchronous endpoint returns (server limits included, errors raised as the endpoint raises
them); ``request`` must be an instance of ``KINDS[name].request``.
"""

from __future__ import annotations

from collections.abc import Awaitable, Callable
from dataclasses import dataclass

from pydantic import BaseModel

from service.executor import ComputePool
from service.metrics import Metrics
from service.routes import exceedance, fit, layers, risk_measures, ruin
from service.schemas.exceedance import ExceedanceRequest, ExceedanceResponse
from service.schemas.fit import FitRequest, FitResponse
from service.schemas.layers import LayersRequest, LayersResponse
from service.schemas.risk_measures import RiskMeasuresRequest, RiskMeasuresResponse
from service.schemas.ruin import RuinRequest, RuinResponse
from service.settings import Settings

Handler = Callable[[BaseModel, Settings, ComputePool, Metrics], Awaitable[BaseModel]]


@dataclass(frozen=True, kw_only=True)
class Kind:
    name: str  # "exceedance" | "risk_measures" | "layers" | "ruin" | "fit"
    request: type[BaseModel]  # the endpoint's request model
    response: type[BaseModel]  # the endpoint's response model
    handle: Handler


KINDS: dict[str, Kind] = {
    kind.name: kind
    for kind in (
        Kind(name="exceedance", request=ExceedanceRequest, response=ExceedanceResponse,
             handle=exceedance.handle),
        Kind(name="risk_measures", request=RiskMeasuresRequest,
             response=RiskMeasuresResponse, handle=risk_measures.handle),
        Kind(name="layers", request=LayersRequest, response=LayersResponse,
             handle=layers.handle),
        Kind(name="ruin", request=RuinRequest, response=RuinResponse, handle=ruin.handle),
        Kind(name="fit", request=FitRequest, response=FitResponse, handle=fit.handle),
    )
}

"""A Python client for tailgauge servers, for pricing pipelines and scheduled risk runs.

    from client import Client
    with Client("http://127.0.0.1:8000") as tg:
        result = tg.risk_measures(portfolio=..., levels=[0.995], seed=7)
        rows = result.to_rows()

Request and response models are the service's own schemas (``service.schemas``); the result
classes add ``to_rows()`` / ``to_frame()``. Errors: see ``client._errors``.
"""

from client._async import AsyncClient
from client._calls import SubmittedRun, batch_key, fresh_key
from client._errors import (
    Conflict,
    ErrorDetail,
    NotAuthorized,
    NotFound,
    RequestRejected,
    RunWaitTimeout,
    ServerFault,
    ServiceError,
    TransportFailed,
    Unavailable,
)
from client._retry import RetryPolicy
from client._sync import Client
from client._tables import (
    ExceedanceResult,
    FitResult,
    LayersResult,
    RiskMeasuresResult,
    RuinResult,
    RunResult,
)

__all__ = [
    "AsyncClient",
    "Client",
    "Conflict",
    "ErrorDetail",
    "ExceedanceResult",
    "FitResult",
    "LayersResult",
    "NotAuthorized",
    "NotFound",
    "RequestRejected",
    "RetryPolicy",
    "RiskMeasuresResult",
    "RuinResult",
    "RunResult",
    "RunWaitTimeout",
    "ServerFault",
    "ServiceError",
    "SubmittedRun",
    "TransportFailed",
    "Unavailable",
    "batch_key",
    "fresh_key",
]

"""Results as tables: ``to_rows()`` (plain dicts, one per figure) and ``to_frame()`` (pandas,
when installed) on every response the client returns.

The result classes subclass the service's own response models, so the contract has one
definition; they only add the table views.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel

from service.schemas.exceedance import ExceedanceResponse
from service.schemas.fit import FitResponse
from service.schemas.layers import LayersResponse
from service.schemas.risk_measures import RiskMeasuresResponse
from service.schemas.ruin import RuinResponse
from service.schemas.runs import RunItemDone, RunOut

__all__ = [
    "ExceedanceResult",
    "FitResult",
    "LayersResult",
    "RiskMeasuresResult",
    "RuinResult",
    "RunResult",
    "Tabular",
]

Row = dict[str, Any]


def _flatten(model: BaseModel, prefix: str = "") -> Row:
    """One level of nesting folded into ``parent_child`` keys (the diagnostics record)."""
    row: Row = {}
    for key, value in model.model_dump(mode="json").items():
        if isinstance(value, dict):
            for inner, inner_value in value.items():
                row[f"{prefix}{key}_{inner}"] = inner_value
        else:
            row[f"{prefix}{key}"] = value
    return row


class Tabular:
    """Mixin: the response as rows of plain values, and as a pandas DataFrame."""

    def to_rows(self) -> list[Row]:
        raise NotImplementedError

    def to_frame(self) -> Any:
        """The rows as a ``pandas.DataFrame`` (needs the optional ``frames`` extra)."""
        try:
            import pandas as pd
        except ImportError as exc:  # the extra is optional by design
            raise ImportError(
                "to_frame() needs pandas: pip install 'tailgauge[frames]'"
            ) from exc
        return pd.DataFrame(self.to_rows())


def _common(result: BaseModel) -> Row:
    return {"method": getattr(result, "method", None), "seed": getattr(result, "seed", None)}


class ExceedanceResult(ExceedanceResponse, Tabular):
    def to_rows(self) -> list[Row]:
        return [{**_common(self), **_flatten(e)} for e in self.estimates]


class RiskMeasuresResult(RiskMeasuresResponse, Tabular):
    """Rows of the measures, then the curve points (``figure`` says which)."""

    def to_rows(self) -> list[Row]:
        rows = [{**_common(self), "figure": "measure", **_flatten(m)} for m in self.measures]
        rows += [{**_common(self), "figure": "curve", **_flatten(c)} for c in self.curve]
        rows += [{**_common(self), "figure": "loss_return_period", **_flatten(r)}
                 for r in self.loss_return_periods]
        return rows


class LayersResult(LayersResponse, Tabular):
    def to_rows(self) -> list[Row]:
        return [{**_common(self), **_flatten(layer)} for layer in self.layers]


class RuinResult(RuinResponse, Tabular):
    def to_rows(self) -> list[Row]:
        return [{**_common(self), **_flatten(e)} for e in self.estimates]


class FitResult(FitResponse, Tabular):
    """One row per fitted severity family: parameters, errors, criteria and test p-values."""

    def to_rows(self) -> list[Row]:
        rows = []
        for fit in self.fits:
            row: Row = {"family": fit.family, "log_likelihood": fit.log_likelihood,
                        "aic": fit.aic, "bic": fit.bic}
            row.update({f"param_{k}": v for k, v in fit.parameters.items()})
            row.update({f"se_{k}": v for k, v in fit.std_errors.items()})
            row.update({f"{name}_p_value": getattr(fit.tests, name).p_value
                        for name in ("ks", "cvm", "ad")})
            rows.append(row)
        return rows


RESULT_BY_KIND: dict[str, type[Tabular]] = {
    "exceedance": ExceedanceResult,
    "risk_measures": RiskMeasuresResult,
    "layers": LayersResult,
    "ruin": RuinResult,
    "fit": FitResult,
}


class RunResult(RunOut, Tabular):
    """A run; ``item(id)`` gives one finished item's typed result."""

    def item(self, item_id: str) -> Tabular:
        for entry in self.results:
            if entry.id == item_id:
                if not isinstance(entry, RunItemDone):
                    raise LookupError(f"item {item_id!r} is {entry.status}, it has no result")
                parse = RESULT_BY_KIND[entry.kind]
                assert issubclass(parse, BaseModel)
                return parse.model_validate(entry.result)
        raise LookupError(f"no finished item {item_id!r} in run {self.run_id}")

    def to_rows(self) -> list[Row]:
        """Every figure of every finished item, tagged with the item's id, kind and status;
        a failed item gives one row with its error."""
        rows: list[Row] = []
        for entry in self.results:
            tag = {"run_id": self.run_id, "item": entry.id, "kind": entry.kind,
                   "status": entry.status}
            if isinstance(entry, RunItemDone):
                rows += [{**tag, **row} for row in self.item(entry.id).to_rows()]
            else:
                error = getattr(entry, "error", None)
                rows.append({**tag, "error": "; ".join(e.msg for e in error) if error else None})
        return rows

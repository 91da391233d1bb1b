"""Writes openapi_examples/fit_commercial_property_fire.json: invented claims of our own
scenario, drawn from known parameters, so that the fit can be checked against the truth.

Brindlecombe Mutual's commercial property fire book, eight underwriting years: ground-up
losses are lognormal(TRUTH_MU, TRUTH_SIGMA); only losses of at least REPORTING_THRESHOLD are
reported (left truncation); each policy has a per-claim limit (250,000, 500,000 or none) and a
loss above it is reported at the limit (right censoring). Reported counts per year follow a
negative binomial around TRUTH_RATE reported claims per 1,000 policies.

    python -m bench.make_fit_example          # rewrites the example (same seed, same file)
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

SEED = 20261202
TRUTH_MU = 9.2
TRUTH_SIGMA = 1.3
REPORTING_THRESHOLD = 2500.0
LIMITS = (50_000.0, 100_000.0, None)
LIMIT_SHARES = (0.6, 0.3, 0.1)
EXPOSURES = (41.0, 43.5, 45.0, 47.2, 50.1, 52.3, 55.0, 58.4)  # thousands of policies
TRUTH_RATE = 1.1  # reported claims per thousand policies and year
TRUTH_NB_SIZE = 30.0
EXAMPLES = Path(__file__).resolve().parents[1] / "openapi_examples"
PATH = EXAMPLES / "fit_commercial_property_fire.json"


def make() -> dict[str, Any]:
    rng = np.random.default_rng(np.random.SeedSequence(SEED))
    exposures = np.asarray(EXPOSURES)
    means = TRUTH_RATE * exposures
    counts = rng.negative_binomial(TRUTH_NB_SIZE, TRUTH_NB_SIZE / (TRUTH_NB_SIZE + means))
    n = int(counts.sum())
    claims: list[float] = []
    while len(claims) < n:  # reported losses: ground-up losses at or above the threshold
        x = rng.lognormal(TRUTH_MU, TRUTH_SIGMA, 4 * n)
        claims.extend(float(v) for v in x[x >= REPORTING_THRESHOLD])
    amounts = np.asarray(claims[:n])
    pick = rng.choice(len(LIMITS), size=n, p=LIMIT_SHARES)
    limits = [LIMITS[i] for i in pick]
    reported = [round(min(x, c) if c is not None else x, 2) for x, c in zip(amounts, limits,
                                                                             strict=True)]
    return {
        "claims": reported,
        "reporting_threshold": REPORTING_THRESHOLD,
        "censored_at": list(limits),
        "families": ["lognormal", "weibull", "pareto", "spliced_lognormal"],
        "tail_threshold": 25_000.0,
        "counts": [int(c) for c in counts],
        "exposures": list(EXPOSURES),
        "bootstrap": {"replicates": 19, "max_claims": 500},
        "seed": 17,
    }


def main() -> None:
    PATH.write_text(json.dumps(make(), indent=1) + "\n", encoding="utf-8")
    body = make()
    capped = sum(c is not None and x >= c
                 for x, c in zip(body["claims"], body["censored_at"], strict=True))
    print(f"wrote {PATH.name}: {len(body['claims'])} claims, {capped} at their limit")


if __name__ == "__main__":
    main()

"""The one settings object of the service, read from TAILGAUGE_* environment variables."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Literal

from pydantic import Field, SecretStr
from pydantic_settings import BaseSettings, SettingsConfigDict

# The examples ship next to the packages in the repository (editable install).
DEFAULT_EXAMPLES_DIR = Path(__file__).resolve().parents[1] / "openapi_examples"


class Settings(BaseSettings):
    """Server, compute-pool and request-limit settings.

    Every field can be set from the environment, e.g. ``TAILGAUGE_PORT=9000`` or
    ``TAILGAUGE_MAX_SAMPLES=1000000``.
    """

    model_config = SettingsConfigDict(env_prefix="TAILGAUGE_", extra="ignore")

    host: str = Field(default="127.0.0.1", description="Interface the server listens on.")
    port: int = Field(default=8000, ge=0, le=65535, description="TCP port of the server.")
    data_dir: Path = Field(
        default=Path("./data"),
        description="Directory for the service's files (the run store lives here); created "
        "at start-up.",
    )
    workers: int = Field(
        default_factory=lambda: os.cpu_count() or 1,
        ge=1,
        description="Size of the computation pool (default: number of CPUs).",
    )
    executor: Literal["process", "thread", "dask"] = Field(
        default="process",
        description="Kind of computation pool: processes (CPU work in parallel), threads "
        "(fallback where processes cannot be started), or a Dask distributed cluster at "
        "dask_scheduler (needs the 'dask' extra).",
    )
    dask_scheduler: str | None = Field(
        default=None,
        description="Address of the Dask scheduler for executor 'dask', e.g. "
        "tcp://10.0.0.5:8786 (TAILGAUGE_DASK_SCHEDULER).",
    )
    split_samples: int = Field(
        default=100_000,
        ge=1,
        description="Requests whose sample budget reaches this many samples are split into "
        "block tasks across every worker (same figures to the last bit); smaller ones run "
        "whole on one worker, ahead of the large ones' queued blocks.",
    )
    max_body_bytes: int = Field(
        default=1024 * 1024, ge=1, description="Largest accepted request body, in bytes (413)."
    )
    max_samples: int = Field(
        default=10_000_000, ge=100, description="Largest sample budget one request may ask for."
    )
    time_limit_s: float = Field(
        default=60.0, gt=0, description="Longest computation time one request may ask for, s."
    )
    time_limit_grace_s: float = Field(
        default=5.0,
        ge=0,
        description="Extra wall time allowed past time_limit_s before the server gives up "
        "waiting for the engine (503).",
    )
    max_thresholds: int = Field(default=1000, ge=1, description="Most thresholds per request.")
    max_lines: int = Field(default=200, ge=1, description="Most lines per portfolio.")
    max_obligor_groups: int = Field(
        default=1000, ge=1, description="Most obligor groups per portfolio (all lines)."
    )
    max_obligors: int = Field(
        default=100_000_000, ge=1,
        description="Most obligors per portfolio (a group of n alike obligors costs as much as "
        "one with fixed LGDs; a beta LGD draws one number per default).",
    )
    max_expected_claims: float = Field(
        default=100_000,
        gt=0,
        description="Largest expected number of claims per simulated year (per sample).",
    )
    examples_dir: Path = Field(
        default=DEFAULT_EXAMPLES_DIR,
        description="Directory of JSON request bodies shown as OpenAPI examples.",
    )
    # --- batch runs (POST /v1/runs, tailgauge run) ---
    run_workers: int | None = Field(
        default=None,
        ge=1,
        description="Batch items computed at the same time by the run worker (default: "
        "workers, the size of the computation pool).",
    )
    run_max_attempts: int = Field(
        default=3,
        ge=1,
        description="Times a batch item may be started; an item that was running when the "
        "server stopped is requeued until then, and then marked failed.",
    )
    max_run_items: int = Field(default=1000, ge=1, description="Most items per batch run.")
    # --- the run store ---
    store_busy_timeout_s: float = Field(
        default=5.0,
        ge=0,
        le=600,
        description="How long a store operation waits for a lock held by another process "
        "(a backup, a second connection) before it is answered with 503 store_busy.",
    )
    store_drill_file: Path | None = Field(
        default=None,
        description="Fault drills only: while this file holds the word 'full', the run store "
        "may not grow (SQLite's own 'database or disk is full' follows), as if the disk "
        "were full; removing the file gives the space back.",
    )
    # --- authentication (service/auth.py) ---
    auth: Literal["auto", "on", "off"] = Field(
        default="auto",
        description="Bearer tokens: 'on' requires one on every computing and runs route; "
        "'off' never asks; 'auto' (default) requires one when tokens are configured or the "
        "server listens beyond loopback (where it then refuses to start without tokens).",
    )
    tokens: SecretStr | None = Field(
        default=None,
        description="Accepted bearer tokens, comma-separated (TAILGAUGE_TOKENS). Each token "
        "sees only the runs it created.",
    )
    token_file: Path | None = Field(
        default=None,
        description="A file of accepted bearer tokens, one per line ('#' starts a comment); "
        "added to tokens.",
    )

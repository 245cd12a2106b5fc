"""All configuration in one object, read from environment variables prefixed ``VERAMP_``."""

from __future__ import annotations

import os
from functools import lru_cache
from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

from contraction import defaults


def _default_data_dir() -> Path:
    return Path(os.environ.get("XDG_DATA_HOME", Path.home() / ".local" / "share")) / "veramp"


class Settings(BaseSettings):
    """Every setting of the service and the command line; each field is read from ``VERAMP_<NAME>``
    (sizes in bytes, times in seconds). Engine defaults come from :mod:`contraction.defaults`."""

    model_config = SettingsConfigDict(env_prefix="VERAMP_", extra="ignore")

    data_dir: Path = Field(default_factory=_default_data_dir, description="database, plans, calibration")
    database_url: str | None = Field(None, description="SQLAlchemy URL; default SQLite in data_dir")
    host: str = Field("127.0.0.1", description="listen address of `veramp serve`")
    port: int = Field(8350, description="port of `veramp serve`")
    memory_bytes: int = Field(defaults.MEMORY_BYTES, description="peak memory cap of one command, or of the service's "
                                                       "contractions on this machine: local worker processes and "
                                                       "jobs that run side by side share it")
    workers: int = Field(max(1, (os.cpu_count() or 1)), description="worker processes for contractions (per "
                                                                      "server worker)")
    server_workers: int = Field(1, ge=1, le=64, description="uvicorn processes answering requests in `veramp serve`; "
                                                            "they share the database and claim jobs atomically")
    plan_budget_seconds: float = Field(defaults.PLAN_BUDGET_SECONDS, description="default planning budget")
    plan_processes: int = Field(max(1, (os.cpu_count() or 1)), description="processes for the plan search of the "
                                                                           "CLI (1: in the calling process)")
    # service limits
    max_qubits: int = defaults.MAX_QUBITS
    max_gates: int = defaults.MAX_GATES
    max_bitstrings: int = 100_000
    max_request_bytes: int = 32 * 2 ** 20
    max_predicted_seconds: float = 24 * 3600.0
    sync_threshold_seconds: float = 2.0
    queue_size: int = 64
    tokens: str | None = Field(None, description="comma-separated bearer tokens")
    tokens_file: Path | None = Field(None, description="file with one bearer token per line")
    dask_scheduler: str | None = Field(None, description="Dask scheduler address (tcp://host:port): slices and "
                                                         "batch chunks of jobs run there instead of locally")

    @property
    def job_slots(self) -> int:
        """Jobs that may contract side by side on this machine: ``server_workers`` x ``workers``; 1 with a
        Dask cluster, where each task runs alone on a worker (one thread)."""
        return 1 if self.dask_scheduler else self.server_workers * max(1, self.workers)

    @property
    def run_memory_bytes(self) -> int:
        """The cap one service run (a job, or a request answered at once) plans and contracts within: an
        equal share of ``memory_bytes`` for each of the :attr:`job_slots`."""
        return max(1, self.memory_bytes // self.job_slots)

    def run_share_note(self) -> str:
        """Said after a refusal for memory when runs share the cap (empty when one run has it all)."""
        if self.job_slots == 1:
            return ""
        return (f" (VERAMP_MEMORY_BYTES={self.memory_bytes} is shared by up to {self.job_slots} jobs running "
                f"side by side: {self.run_memory_bytes} bytes each)")

    @property
    def plan_dir(self) -> Path:
        """Directory of the CLI's plan store."""
        return self.data_dir / "plans"

    @property
    def calibration_path(self) -> Path:
        """File of the stored machine rates."""
        return self.data_dir / "calibration.json"

    @property
    def sqlalchemy_url(self) -> str:
        """The database URL: ``database_url`` or SQLite in the data directory."""
        return self.database_url or f"sqlite:///{self.data_dir / 'veramp.sqlite'}"

    def token_set(self) -> frozenset[str]:
        """The bearer tokens from ``tokens`` and ``tokens_file``."""
        tokens = set()
        if self.tokens:
            tokens |= {t.strip() for t in self.tokens.split(",") if t.strip()}
        if self.tokens_file:
            tokens |= {t.strip() for t in Path(self.tokens_file).read_text().splitlines() if t.strip()}
        return frozenset(tokens)


@lru_cache
def get_settings() -> Settings:
    """The settings, read from the environment once per process."""
    return Settings()

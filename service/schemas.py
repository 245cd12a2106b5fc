"""Request and response schemas of the REST API (pydantic), apart from the storage models."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

Dtype = Literal["complex128", "complex64"]
Engine = Literal["auto", "statevector", "batch", "single", "stacked"]
BlockEngine = Literal["auto", "statevector", "batch", "single"]        # a block is one group: nothing to stack

GHZ_EXAMPLE = 'OPENQASM 2.0;\ninclude "qelib1.inc";\nqreg q[3];\nh q[0];\ncx q[0],q[1];\ncx q[1],q[2];\n'


class CircuitIn(BaseModel):
    """A circuit given inline: OpenQASM text or the JSON document (exactly one)."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [{"qasm": GHZ_EXAMPLE}]})
    qasm: str | None = Field(None, description="OpenQASM 2.0 or 3 text")
    document: dict[str, Any] | None = Field(None, description="veramp JSON circuit document")


class CircuitRef(BaseModel):
    """A circuit given by id or inline (exactly one of the two)."""

    model_config = ConfigDict(extra="forbid")
    circuit_id: str | None = Field(None, description="content hash of a registered circuit")
    circuit: CircuitIn | None = None


class CircuitOut(BaseModel):
    """A registered circuit's ids and sizes."""

    circuit_id: str
    architecture_id: str
    num_qubits: int
    num_gates: int


class CircuitDetail(CircuitOut):
    """A registered circuit with its JSON document."""

    document: dict[str, Any]


class EstimateIn(CircuitRef):
    """What to estimate: a circuit and how many distinct amplitudes."""

    count: int = Field(1, ge=1, description="number of distinct amplitudes wanted")
    dtype: Dtype = "complex128"
    engine: Engine = "auto"


class AmplitudesIn(CircuitRef):
    """A circuit and the bitstrings (qubit 0 first) whose amplitudes are wanted."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [
        {"circuit": {"qasm": GHZ_EXAMPLE}, "bitstrings": ["000", "111", "010"]}]})
    bitstrings: list[str] = Field(..., min_length=1, description="qubit 0 first")
    dtype: Dtype = "complex128"
    engine: Engine = "auto"


class AmplitudeOut(BaseModel):
    """One bitstring's amplitude (re, im), probability and whether it came from the cache."""

    bitstring: str
    amplitude: tuple[float, float]
    probability: float
    cached: bool


class Provenance(BaseModel):
    """How an answer was made: versions, engine and reason, plan, dtype, times, cache counts and the rates used."""

    versions: dict[str, str]
    engine: str | None
    plan_hash: str | None
    dtype: str
    wall_seconds: float
    computed: int
    cached: int
    reason: str | None = None               # why this engine (the automatic choice or "requested")
    batch: int | None = None                # bitstrings per contraction
    chunks: int | None = None               # contractions run
    predicted_seconds: float | None = None
    rates: str | None = None                # "measured", or "nominal (calibration running)"


class AmplitudesOut(BaseModel):
    """Amplitudes in input order with their provenance."""

    circuit_id: str
    results: list[AmplitudeOut]
    provenance: Provenance


JobStatus = Literal["queued", "running", "succeeded", "failed", "cancelled"]


class PlanningOut(BaseModel):
    """Where a job's plan search stands."""

    trials: int = Field(description="search trials finished")
    best_madds: float | None = Field(None, description="complex multiply-adds of the best tree so far")
    seconds: float = Field(description="seconds since this search started")
    budget_seconds: float = Field(description="the search's budget (a share of the request's planning budget)")


class JobOut(BaseModel):
    """A job's status, progress, ETA, error and provenance."""

    job_id: str
    status: JobStatus
    circuit_id: str
    total: int
    done: int
    progress: float
    eta_seconds: float | None
    error: str | None = None
    provenance: dict[str, Any] | None = None
    phase: Literal["planning", "contracting"] | None = Field(
        None, description="while running: planning (engine choice, plan search; no ETA yet), then contracting")
    planning: PlanningOut | None = Field(
        None, description="the plan search's progress (the last search of the job; kept once it ended)")


class ResultsPage(BaseModel):
    """A page of a job's results."""

    job_id: str
    offset: int
    limit: int
    total: int
    results: list[AmplitudeOut]


class ErrorOut(BaseModel):
    """Every error body: kind, message, and line/column/limit when they apply."""

    error: str
    message: str
    line: int | None = None
    column: int | None = None
    limit: str | None = None


class BlockIn(CircuitRef):
    """A circuit, the k open qubits and the fixed values of the others."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [
        {"circuit": {"qasm": GHZ_EXAMPLE}, "qubits": [0, 2], "fixed": "000"}]})
    qubits: list[int] = Field(..., min_length=1, max_length=20, description="the k open qubits, in output order")
    fixed: str = Field(..., description="n-bit string giving the other qubits' values (open positions ignored)")
    dtype: Dtype = "complex128"
    engine: BlockEngine = "auto"


class BlockOut(BaseModel):
    """The 2^k amplitudes of a block, entry order described in ``order``."""

    circuit_id: str
    qubits: list[int]
    order: str = Field(..., description="how entry i maps to the qubits' values")
    amplitudes: list[tuple[float, float]]
    engine: str
    reason: str
    wall_seconds: float


class MarginalIn(CircuitRef):
    """A circuit and the k measured qubits."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [
        {"circuit": {"qasm": GHZ_EXAMPLE}, "qubits": [0, 2]}]})
    qubits: list[int] = Field(..., min_length=1, max_length=20, description="the k measured qubits, in output order")
    engine: Literal["auto", "statevector", "single"] = "auto"


class MarginalOut(BaseModel):
    """The 2^k marginal probabilities, entry order described in ``order``."""

    circuit_id: str
    qubits: list[int]
    order: str
    probabilities: list[float]
    engine: str
    reason: str
    wall_seconds: float


class RecoverIn(BaseModel):
    """Where to sample p(θ) and where to recover it, with the corruption and noise the recovery allows for."""

    model_config = ConfigDict(extra="forbid")
    nodes: list[float] = Field(..., min_length=2, max_length=1000, description="theta values to sample p at")
    targets: list[float] = Field([1.0], min_length=1, max_length=200, description="where to evaluate the recovery")
    errors: int = Field(0, ge=0, le=100, description="samples that may be corrupted (Berlekamp–Welch)")
    noise: float | None = Field(None, ge=0, lt=1, description="relative noise of the samples (default: exact up to "
                                                              "double-precision rounding)")
    max_relative_error: float = Field(0.1, gt=0, le=1, description="decline a target whose error bound exceeds "
                                                                   "this share of its value")


class PathIn(CircuitRef):
    """A circuit, a bitstring and the Cayley path's seed and thetas, with an optional recovery."""

    model_config = ConfigDict(extra="forbid", json_schema_extra={"examples": [
        {"circuit": {"qasm": GHZ_EXAMPLE}, "bitstring": "111", "seed": 7, "thetas": [0, 0.5, 1],
         "recover": {"nodes": [0.0, 0.05, 0.1, 0.15, 0.2, 0.25, 0.3, 0.35, 0.4, 0.45, 0.5, 0.55, 0.6, 0.65, 0.7,
                               0.75, 0.8, 0.85, 0.9, 0.95, 1.0], "targets": [0.33]}}]})
    bitstring: str
    seed: int = Field(0, ge=0, description="seed of the Haar deformations H_k")
    thetas: list[float] = Field(..., min_length=1, max_length=2000)
    recover: RecoverIn | None = None


class PathOut(BaseModel):
    """p(θ) along the path, the engine used and the recovery if asked for."""

    circuit_id: str
    bitstring: str
    seed: int
    engine: str
    gate_dimension_sum: int = Field(..., description="sum_k d_k of the gate dimensions: the degree of the "
                                                     "amplitude's numerator and denominator")
    fitted_degree: int = Field(..., description="degree of the numerator of p(theta): 2 sum_k d_k")
    theta: list[float]
    probability: list[float]
    recovery: dict[str, Any] | None = None

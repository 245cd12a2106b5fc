"""Execution: contracting planned networks slice by slice (in process, local workers, Dask), the
request path for amplitudes, blocks and marginals, the state vector, and machine calibration."""

__all__ = ["amplitudes", "blocks", "calibration", "dask_runner", "executor", "pairwise", "reuse", "slices", "statevector"]

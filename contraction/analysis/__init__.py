"""Analysis of amplitudes: XEB and depth fits, the Cayley path and its rational recovery, patch
probabilities."""

__all__ = ["cayley", "patches", "rational_fit", "xeb"]

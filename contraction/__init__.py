"""The engine: circuit text → circuit model → tensor network → plan → execution → amplitudes → analysis.

Subpackages follow that order and import only the ones before them; ``errors`` and ``defaults``
sit below all of them."""

__all__ = ["analysis", "circuits", "defaults", "errors", "execution", "network", "planning"]

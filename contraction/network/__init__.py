"""The tensor network of a circuit: its structure (from the layout only) and its tensor values."""

__all__ = ["builder", "simplify"]

"""Planning: contraction-order search under a memory cap, the plan store, machine rates, the engine
choice and cost estimates. Nothing here contracts a network."""

__all__ = ["engine_choice", "estimate", "rates", "search", "store"]

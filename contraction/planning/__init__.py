"""Planning: contraction-order search under a memory cap, the plan store, machine rates, the engine
choice, cost estimates and which intermediates to keep between slices. Nothing here contracts a network."""

__all__ = ["capped_plans", "engine_choice", "estimate", "rates", "search", "slice_reuse", "store"]

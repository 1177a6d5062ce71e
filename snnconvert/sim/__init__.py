"""Single-spike simulators: vectorized (batched, exact integers) and event-by-event reference."""

from snnconvert.sim.vectorized import SimResult, quantized_forward, simulate

__all__ = ["SimResult", "simulate", "quantized_forward"]

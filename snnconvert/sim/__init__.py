"""Single-spike simulators: vectorized (batched, exact integers) and event-by-event reference.

`sim.reference` runs with numpy alone; `sim.vectorized` (and `simulate`, `SimResult`,
`quantized_forward` re-exported here) needs torch, so those names load it on first use only.
"""

__all__ = ["SimResult", "quantized_forward", "simulate"]


def __getattr__(name):
    if name in __all__:
        from snnconvert.sim import vectorized
        return getattr(vectorized, name)
    raise AttributeError(f"module 'snnconvert.sim' has no attribute {name!r}")

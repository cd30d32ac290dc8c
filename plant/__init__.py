"""The numpy/numba model of the totem-pole PFC power stage (knows nothing of C)."""

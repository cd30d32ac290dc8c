"""Power-stage sizing and the numpy model of the totem-pole PFC (knows nothing of C)."""

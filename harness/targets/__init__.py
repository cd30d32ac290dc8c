"""Targets: the lockstep link (host side), its transports and processor-in-the-loop runs."""

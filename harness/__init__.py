"""Closed loop, scenarios, metrics, reports and the command line of pfcrig."""

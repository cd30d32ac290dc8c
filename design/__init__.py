"""The bottom layer of pfcrig: everything decided before any simulation (config and its
validation, sizing, derived settings, loop tuning, the constants of the generated C) and
the controller contract.  Imports nothing of the rest of the project."""

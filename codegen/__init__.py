"""Config loading, loop tuning, C rendering and building for pfcrig."""

"""Pure numerical routines: arrays in, small dataclasses out. No verdicts, no plots, no reports."""

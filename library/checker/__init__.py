"""Chain checker: static (SMT), model and simulation methods, verdict per handoff."""

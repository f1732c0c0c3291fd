"""kinetome.library: skill specs, predicates, controllers, store, runtime, checker, CLI."""

__all__: list[str] = []

"""kinetome.trainers: option-model fitting and the option actor-critic trainer."""

__all__: list[str] = []

"""The invented demo scenario and the demo pipeline."""

__all__: list[str] = []

"""The training core: plain numpy numerics on arrays and frames (no optuna, no database, no CLI)."""

__all__: list[str] = []

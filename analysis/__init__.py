"""broodline's analysis layer: analytic invasion theory and its comparison with simulations."""

__all__: list[str] = []

"""Areas in words for the log: square metres, hectares or square kilometres as the size fits."""
from __future__ import annotations

HECTARE = 1.0e4
"""Square metres per hectare."""

SQUARE_KILOMETRE = 1.0e6
"""Square metres per square kilometre."""


def area_words(area: float, units: str) -> str:
    """An area in CRS units squared as readable text, e.g. ``"112.9 ha"`` for 1,129,120 square metres.

    In metres: below 1 ha in m², below 100 km² in ha, above in km² (four significant digits).
    Other units stay in their own square units, e.g. ``"12,400 square US survey foot units"``.
    """
    if units != "metre":
        return f"{area:,.0f} square {units} units" if area >= 1000 else f"{area:.4g} square {units} units"
    if area < HECTARE:
        return f"{area:,.4g} m²"
    if area < 100 * SQUARE_KILOMETRE:
        return f"{area / HECTARE:,.4g} ha"
    return f"{area / SQUARE_KILOMETRE:,.4g} km²"

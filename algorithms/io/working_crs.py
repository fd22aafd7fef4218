"""Choice of the projected CRS in which distances are measured (the working CRS)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import FieldcastError
from .crs import linear_units, parse_crs, to_wkt2, utm_crs_for


@dataclass(frozen=True)
class WorkingCrs:
    """The working CRS and why it was chosen.

    Attributes
    ----------
    wkt : str
        WKT2 of the projected working CRS.
    units : str
        Its linear unit (``"metre"`` for metres).
    reason : str
        One sentence for the log saying which CRS is used and why.
    """

    wkt: str
    units: str
    reason: str


def choose_working_crs(layer_wkt: str, layer_xy: np.ndarray, target_wkt: str | None = None) -> WorkingCrs:
    """Pick the working CRS for samples at ``layer_xy`` (layer CRS coordinates).

    A target CRS, when given, is used as it is (it must be projected). Otherwise
    a projected layer CRS is kept, and a geographic one is replaced by the WGS 84
    UTM zone of the centre of the samples' bounding box.

    Raises
    ------
    FieldcastError
        If the target CRS is geographic, or a CRS has no usable distance unit.
    """
    layer = parse_crs(layer_wkt)
    if target_wkt:
        target = parse_crs(target_wkt)
        if target.is_geographic:
            raise FieldcastError(f"The target CRS {target.name!r} is in degrees. Choose a projected CRS with a "
                                 "distance unit (e.g. the local UTM zone or the national grid), or leave it empty.")
        return WorkingCrs(to_wkt2(target), linear_units(target_wkt),
                          f"Working CRS: {target.name} (the target CRS you set); samples are reprojected into it.")
    if not layer.is_geographic:
        return WorkingCrs(to_wkt2(layer), linear_units(layer_wkt),
                          f"Working CRS: {layer.name} (the layer's own projected CRS).")
    low, high = np.min(layer_xy, axis=0), np.max(layer_xy, axis=0)
    centre = (low + high) / 2.0
    utm = utm_crs_for(float(centre[0]), float(centre[1]))
    wkt = to_wkt2(utm)
    return WorkingCrs(wkt, linear_units(wkt),
                      f"Working CRS: {utm.name} ({utm.to_string()}), the UTM zone of the data centre, because the "
                      f"layer CRS {layer.name} is in degrees. Set 'Target CRS' to choose another projected CRS.")

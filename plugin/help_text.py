"""Help text shared by the toolbox algorithms: layout and the cautions every tool repeats."""
from __future__ import annotations

from html import escape

CAUTIONS = (
    "The surfaces and numbers are model-based estimates: they assume the chosen covariance model and a "
    "stationary field (the same kind of spatial variation everywhere). Read the variance together with the "
    "prediction. Decisions on contamination or health follow local regulations and licensed professional "
    "judgement, not this output alone."
)

WORKING_CRS_NOTE = (
    "Distances are measured in a projected working CRS: the layer's own CRS when it is projected; for a "
    "longitude/latitude layer the UTM zone of the data centre, unless you set a target CRS. The log says "
    "which CRS was used."
)

TARGET_CRS_HELP = ("Target CRS", "Projected CRS to work in; empty = the layer CRS, or a UTM zone for degrees.")

MODEL_FILE_HELP = (
    "Model file",
    "Written by 'Fit covariance model'; its CRS must be the working CRS. Empty: a model is fitted with the "
    "defaults (auto family, anisotropy, constant mean, REML, no transform) and the log says so.",
)

FIT_HELP = [
    ("Transform", "none, or log: model ln(value + log offset), for skewed positive data such as metal "
     "concentrations. Log needs every value + offset > 0."),
    ("Log offset", "Added to the values before the logarithm (attribute units, default 0)."),
    ("Covariance family", "auto tries exponential, spherical, Gaussian, Matérn 3/2 and 5/2 and keeps "
     "the best by AIC; or choose one; matern also fits the smoothness."),
    ("Anisotropy", "Let the range depend on direction (an ellipse with an azimuth and a minor/major "
     "ratio)."),
    ("Trend", "Mean of the field: constant, or a linear or quadratic surface of the coordinates."),
    ("Fitting method", "reml (restricted maximum likelihood, the default), ml, or wls (weighted least "
     "squares on the empirical semivariogram)."),
]

GRID_HELP = [
    ("Extent", "Area of the raster; empty = extent of the samples. Cell edges fall on whole multiples of the pixel "
     "size, so rasters from several runs line up. An extent more than 10 times as wide (diagonal) as the samples "
     "is refused: so far from every sample kriging only repeats the mean."),
    ("Pixel size", "Cell width in working CRS units (e.g. metres). Empty: half the median distance between "
     "neighbouring samples, rounded, and coarser if the grid would exceed a million cells."),
    ("Mask", "Optional polygon layer: cells whose centre is outside every polygon are nodata (and, in "
     "'Simulate conditional fields', left out of the areas and means)."),
]

BACKTRANSFORM_HELP = ("Back-transform", "For a log model only: median (exp(mu) - offset, the default, robust) or "
                      "mean (exp(mu + s2/2) - offset).")

NEIGHBOURHOOD_HELP = [
    ("Neighbours per cell", "0 (the default): every sample takes part in every cell (global kriging), up to "
     "5,000 samples; with more, each cell uses its 64 nearest samples and the log says so. A number k: each "
     "cell is kriged from its k nearest samples (local kriging; 16 to 64 is common practice), faster for many "
     "samples and following local changes of the mean. It must be more than the number of trend terms (at "
     "least 2 for a constant mean). Local kriging is an approximation whose closeness depends on the model: "
     "with up to 2,000 samples the log reports how far it is from kriging with all samples at 500 cells drawn "
     "at random, and warns above 1 % (of the standard deviation for the prediction, of the sill for the "
     "variance)."),
    ("Search radius", "With local kriging only: neighbours farther than this (working CRS units, along the "
     "major axis; the search ellipse follows the model's anisotropy) are left out. Cells with too few samples "
     "in range are nodata, and the log says how many. Empty: no limit."),
]

THRESHOLD_HELP = (
    "Threshold",
    "A limit in the attribute's own units (e.g. 500 for 500 ppm), also for a log model: the tool transforms it "
    "the same way as the data. Needed for the exceedance output.",
)


def compose_help(summary: str, parameters: list[tuple[str, str]], outputs: list[tuple[str, str]]) -> str:
    """HTML help: a summary, the parameters and outputs in plain words, the working CRS and the cautions.

    Parameters
    ----------
    summary : str
        What the tool does, one or two sentences.
    parameters, outputs : list of (label, explanation)
        Shown as definition lists in the order given.
    """
    def definitions(items: list[tuple[str, str]]) -> str:
        rows = "".join(f"<dt><b>{escape(label, quote=False)}</b></dt><dd>{escape(text, quote=False)}</dd>"
                       for label, text in items)
        return f"<dl>{rows}</dl>"

    return (
        f"<p>{escape(summary, quote=False)}</p>"
        f"<h3>Parameters</h3>{definitions(parameters)}"
        f"<h3>Outputs</h3>{definitions(outputs)}"
        f"<p>{escape(WORKING_CRS_NOTE, quote=False)}</p>"
        f"<p><b>Cautions.</b> {escape(CAUTIONS, quote=False)}</p>"
    )

"""Help text shared by the toolbox algorithms: layout, the cautions every tool repeats, and what the toolbox
finds them by (search words, short descriptions, the README section each help button opens, per-parameter help).
"""
from __future__ import annotations

import re
from html import escape, unescape
from pathlib import Path

CAUTIONS = (
    "The surfaces and numbers are model-based estimates: they assume the chosen covariance model and a "
    "stationary field (the same kind of spatial variation everywhere). Read the variance together with the "
    "prediction. Decisions on contamination or health follow local regulations and licensed professional "
    "judgement, not this output alone."
)

DESIGN_CAUTION = (
    "A design is only as good as the model it rests on: refit the model when the new samples are in. Access, "
    "safety and regulation come first: check every proposed place on site and follow local rules and licensed "
    "professional judgement on where and how to sample."
)

AREA_CAUTIONS = (
    "A per-unit decision is only as good as the model behind it: check the model with 'Cross-validate model' "
    "first. Access, safety and regulation come first; these probabilities inform, they do not decide."
)

WORKING_CRS_NOTE = (
    "Distances are measured in a projected working CRS: the layer's own CRS when it is projected; for a "
    "longitude/latitude layer the UTM zone of the data centre, unless you set a target CRS (or a template "
    "raster, where the tool has one: its CRS). The log says which CRS was used."
)

TARGET_CRS_HELP = ("Target CRS", "Projected CRS to work in; empty = the layer CRS, or a UTM zone for degrees.")
RASTER_TARGET_CRS_HELP = (
    "Target CRS",
    "Projected CRS to work in; empty = the template raster's CRS when a template is given (another target CRS is "
    "then refused), else the layer CRS, or a UTM zone for degrees.",
)

MODEL_FILE_HELP = (
    "Model file",
    "Written by 'Fit covariance model'; its CRS must be the working CRS. Empty: a model is fitted with the "
    "defaults (auto family, anisotropy, constant mean, REML, no transform) and the log says so.",
)

FIT_HELP = [
    ("Transform", "none, or log: model ln(value + log offset), for skewed positive data such as metal "
     "concentrations. Log needs every value + offset > 0. boxcox: model ((value + offset)^lambda - 1) / lambda "
     "(Box-Cox; lambda 0 is the log), lambda given or estimated by profile likelihood, also needs value + offset > "
     "0. normalscore: model the normal scores of the values (their distribution, weighted by cell declustering, "
     "matched to a standard normal; linear between the values and in the tails to bounds one tenth of the data "
     "range beyond them). Every later tool applies the transform recorded in the model file; boxcox and normalscore "
     "maps are back-transformed through the inverse (median, quantiles) and by numerical integration (mean, "
     "variance)."),
    ("Log offset", "Added to the values before the logarithm or the Box-Cox power (attribute units, default 0)."),
    ("Box-Cox lambda", "For boxcox only: the exponent, between -5 and 5 (0 = log, 1 = a shift only). Empty: "
     "estimated in [-1, 2] by profile likelihood (the model refitted at each lambda tried, the exponential family "
     "when the family is auto; slower), and the log gives the value."),
    ("Covariance family", "auto tries exponential, spherical, Gaussian, Matérn 3/2 and 5/2 and keeps "
     "the best by AIC; or choose one; matern also fits the smoothness."),
    ("Anisotropy", "Let the range depend on direction (an ellipse with an azimuth and a minor/major "
     "ratio)."),
    ("Trend", "Mean of the field: constant, or a linear or quadratic surface of the coordinates."),
    ("Fitting method", "reml (restricted maximum likelihood, the default), ml, or wls (weighted least "
     "squares on the empirical semivariogram)."),
    ("Likelihood neighbours (above 2,000 samples)", "With more than 2,000 samples the likelihood is the Vecchia "
     "approximation: each sample is conditioned on this many nearest samples earlier in a spread-out (maximin) "
     "order (default 30). More is closer to the exact likelihood and slower. There, auto also compares one "
     "structure with a short- plus a long-range pair and keeps the lower AIC."),
]

NONDETECT_HELP = [
    ("Below-limit field", "A boolean or 0/1 field of the samples, true where the value is a reporting limit (the "
     "true value lies below it). A text value field may also hold entries such as \"<0.5\" or \"< 0.5\": the "
     "number after < is the limit. The log counts both kinds; the model file records how many were censored."),
    ("Values below a limit", "likelihood (default): limits stay inequalities in the model; the fit draws the "
     "censored values below their limits (seeded, reproducible) and averages the model over its iterations. "
     "substitution: each limit is replaced by the substitution factor times it, and then treated as a measured "
     "value: simpler, but the fit and the map then rest on invented numbers."),
    ("Substitution factor", "Multiplier of the limit for substitution, above 0 and at most 1 (default 0.5)."),
]

COVARIATE_HELP = [
    ("Covariate rasters", "Optional raster layers of continuous values that explain part of the value field "
     "(distance to a river, elevation, ...). Each enters the mean as one term whose coefficient is estimated "
     "from all samples by generalised least squares (kriging with external drift); kriging then works on what "
     "they leave unexplained. They help when the field follows them closely and the rasters cover every place "
     "mapped; the log and the model file give each coefficient with its standard error. Band 1 is read at the "
     "samples (bilinear, in the raster's own CRS) and, for maps, resampled onto the output cells; samples where "
     "a raster has no value are left out and counted, and such places get no prediction (counted). Caution: the "
     "covariate trend extrapolates where a covariate leaves the range it has at the samples, and the log counts "
     "those places. A covariate that does not vary at the samples, or repeats the trend or another covariate, "
     "is refused. Covariates are known by their layer names: a tool reading a model file needs the rasters it "
     "was fitted with, under the same names and in the same order (a missing or extra one is refused)."),
    ("Class covariate rasters", "Optional raster layers of class codes (soil type, flood-frequency class, land "
     "use). Each class seen at the samples gets a mean term of its own, except the most frequent one (the "
     "baseline, recorded in the model file). Classes are taken from the cell that holds a sample or a target "
     "(nearest), never averaged; a place whose class no sample has gets no prediction (its term cannot be "
     "estimated), and is counted. With covariates, kriging uses all samples: Neighbours above 0 (local kriging) "
     "is refused until it can take the coefficients estimated from all samples."),
]

GRID_HELP = [
    ("Template raster", "Optional raster layer (a file GDAL reads, e.g. an elevation or land-use GeoTIFF) whose "
     "grid the outputs take exactly: its CRS, corner, cell size, columns and rows, so they overlay it cell for "
     "cell. Its CRS is then the working CRS (samples are reprojected into it; a model file must have been fitted "
     "in it); it must be projected (warp a template in degrees first, Raster > Projections > Warp (reproject)), "
     "north-up, not rotated, with square cells. Leave Extent and Pixel size empty with a template (setting them "
     "is refused), and Target CRS empty or the template's CRS. Empty: the grid follows Extent and Pixel size."),
    ("Extent", "Area of the raster; empty = extent of the samples (leave it empty with a template). Without a "
     "template, cell edges fall on whole multiples of the pixel size, so rasters from several runs line up. An "
     "extent more than 10 times as wide (diagonal) as the samples is refused: so far from every sample kriging "
     "only repeats the mean."),
    ("Pixel size", "Cell width in working CRS units (e.g. metres). Empty: half the median distance between "
     "neighbouring samples, rounded, and coarser if the grid would exceed a million cells."),
    ("Mask", "Optional polygon layer: cells whose centre is outside every polygon are nodata (and, in "
     "'Simulate conditional fields', left out of the areas and means)."),
    ("Template nodata cells stay nodata", "With a template raster only: on (the default), cells where band 1 of "
     "the template is nodata (its nodata value, mask band, or NaN) are nodata in the outputs too, and with Mask "
     "polygons only cells inside both are mapped. Off: the template gives only the grid."),
]

MAP_AREA_HELP = [
    ("Map area", "hull (the default): only cells within the hull margin of the samples' convex hull are "
     "predicted, the others are nodata, so the map does not reach far beyond the data, where kriging only "
     "returns the model's mean and its variance nears the sill. extent: every cell of the extent (and mask) is "
     "predicted. A mask still applies with either choice. The log counts the cells farther than the model's "
     "effective range from every sample and the cells predicted outside the samples' range, and warns above 1 %."),
    ("Hull margin", "How far the convex hull is grown, in working CRS units. Empty: the median distance "
     "between neighbouring samples (the log says how much)."),
]

BACKTRANSFORM_HELP = ("Back-transform", "For a transformed model only: median (exp(mu) - offset for log, the "
                      "inverse transform of mu in general; the default, robust) or mean (exp(mu + s2/2) - offset for "
                      "log; Gauss-Hermite quadrature for boxcox and normalscore).")

LOCAL_MEAN_HELP = (
    "Re-estimate the mean in each neighbourhood",
    "With local kriging and a linear, quadratic or covariate trend only. Off (the default): the trend is "
    "estimated once from all samples and each place krigs the residuals from its neighbours, spread around it "
    "over 8 sectors; the variance includes the trend's estimation error. On: each neighbourhood fits its own "
    "trend to its few samples, a locally varying mean. Where the neighbours sit on one side of the place (in "
    "gaps, at the edges of the samples, beyond a cloud of points) that local trend is extrapolated, the "
    "prediction can run away and the variance is too small there. A constant mean is estimated in each "
    "neighbourhood either way; covariates need it off.",
)

NEIGHBOURHOOD_HELP = [
    ("Neighbours per cell", "0 (the default): every sample takes part in every cell (global kriging), up to "
     "5,000 samples; with more, each cell uses its 64 nearest samples and the log says so. A number k: each "
     "cell is kriged from its k nearest samples (local kriging; 16 to 64 is common practice; nearby cells share "
     "one search where it holds each cell's own 4 nearest), faster for many "
     "samples and following local changes of the mean. It must be more than the number of trend terms (at "
     "least 2 for a constant mean). Local kriging is an approximation whose closeness depends on the model: "
     "with up to 2,000 samples the log reports how far it is from kriging with all samples at 500 cells drawn "
     "at random, and warns above 1 % (of the standard deviation for the prediction, of the sill for the "
     "variance)."),
    ("Search radius", "With local kriging only: neighbours farther than this (working CRS units, along the "
     "major axis; the search ellipse follows the model's anisotropy) are left out. Cells with too few samples "
     "in range are nodata, and the log says how many. Empty: no limit."),
    LOCAL_MEAN_HELP,
]

POINT_NEIGHBOURHOOD_HELP = [
    ("Neighbours per point", "0 (the default): every sample takes part in every target point (global kriging), "
     "up to 5,000 samples; with more, each point uses its 64 nearest samples and the log says so. A number k: "
     "each point is kriged from its k nearest samples (local kriging; 16 to 64 is common practice; nearby points "
     "share one search where it holds each point's own 4 nearest), as 'Predict "
     "surface' does with the same setting. It must be more than the number of trend terms (at least 2 for a "
     "constant mean). With up to 2,000 samples the log reports how far local kriging is from kriging with all "
     "samples at up to 500 target points drawn at random, and warns above 1 %."),
    ("Search radius", "With local kriging only: neighbours farther than this (working CRS units, along the "
     "major axis; the search ellipse follows the model's anisotropy) are left out. Points with too few samples "
     "in range get empty (NULL) results, and the log says how many. Empty: no limit."),
    LOCAL_MEAN_HELP,
]

THRESHOLD_HELP = (
    "Threshold",
    "A limit in the attribute's own units (e.g. 500 for 500 ppm), also for a log model: the tool transforms it "
    "the same way as the data. Needed for the exceedance output.",
)

NUGGET_HELP = (
    "Nugget",
    "Advanced. Holds the nugget at this value instead of fitting it, e.g. from laboratory duplicates (half the "
    "mean squared difference of duplicate pairs), in modelling units squared: with the log transform in log units "
    "squared (of ln(value + offset)). Used when a model is fitted here (with a model file the file's nugget "
    "applies); likelihood methods only, and not with one model shared by several fields. Empty: fitted.",
)

ERROR_VARIANCE_HELP = (
    "Error variance field",
    "Advanced. Optional numeric field of the sample layer: each sample's own measurement-error variance "
    "(heteroscedastic nugget), in modelling units squared (log units squared for a log model), 0 for an exact "
    "value. It adds to the diagonal of the kriging system beside the model's nugget (which then stands for the "
    "micro-scale variation and any error the field leaves out) in the fit, kriging, leave-one-out and "
    "simulation. Samples at one location merge to their inverse-variance weighted mean, with the combined "
    "variance. A sample with a value but an empty, non-numeric or negative error variance is refused (the "
    "message names its feature id). A model file records the field's name; give the same field when you use it.",
)

PREDICT_TARGET_HELP = (
    "Target of the prediction",
    "Advanced. true (default): the true value at the place, without measurement error; the variance leaves out "
    "the nugget and the error variances. measurement: a new measurement at the place, whose variance adds the "
    "nugget and, with an error variance field, the median of the samples' error variances; the quantiles and "
    "exceedance follow. Point support only.",
)

INTERVAL_HELP = (
    "Interval probability",
    "Probability of the central predictive interval whose ends the lower and upper quantile outputs hold, "
    "strictly between 0 and 1: 0.9 (the default) gives the 5 % and 95 % quantiles. The interval is one of the "
    "model's predictive distribution (for a log model the lognormal one), not a guarantee.",
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


SEARCH_WORDS = ("kriging", "interpolation", "geostatistics", "gaussian process", "spatial prediction",
                "uncertainty", "points to raster")
"""Words every Fieldcast algorithm is found by in the toolbox search."""

ALGORITHM_WORDS = {
    "fitmodel": ("variogram", "semivariogram", "covariance model", "REML", "maximum likelihood", "nugget", "sill",
                 "range", "anisotropy", "Matérn"),
    "predict": ("surface", "prediction", "variance", "standard error", "exceedance", "probability", "block kriging",
                "threshold"),
    "predictmany": ("surface", "prediction", "variance", "several fields", "batch", "shared model"),
    "simulate": ("conditional simulation", "realisations", "circulant embedding", "Monte Carlo", "area above",
                 "exceedance"),
    "predictpoints": ("points", "wells", "receptors", "prediction", "variance", "standard error", "exceedance",
                      "threshold", "point layer"),
    "assessareas": ("polygons", "units", "parcels", "remediation", "block average", "exceedance", "volume",
                    "threshold"),
    "crossvalidate": ("cross-validation", "leave-one-out", "validation", "residuals", "RMSE", "model check"),
    "proposesamples": ("sampling design", "where to sample", "new samples", "monitoring network", "kriging variance",
                       "misclassification", "threshold"),
}
"""Further search words per algorithm name (the id after ``fieldcast:``)."""

SHORT_DESCRIPTIONS = {
    "fitmodel": "Fits a kriging covariance model (nugget, sill, range) to point samples and saves it as a model file.",
    "predict": "Kriges a raster of predictions from point samples, with its variance and exceedance probability.",
    "predictmany": "Fits a model to each of several fields and kriges their prediction and variance rasters.",
    "simulate": "Draws conditional simulations of the field on a grid, with summaries and areas above a threshold.",
    "crossvalidate": "Checks a kriging model by leave-one-out prediction of the samples.",
    "predictpoints": "Kriges the value, its variance and standard error at the points of a layer, from samples.",
    "proposesamples": "Proposes where to take new samples so as to lower the kriging variance or misclassification.",
    "assessareas": "Per polygon: the expected average, its uncertainty and the probability it exceeds a limit.",
}
"""One line per algorithm name, shown in the toolbox tooltip."""

README = Path(__file__).resolve().parent.parent / "README.md"
"""The README shipped in the plugin folder: its section per algorithm is the algorithm's help page."""


def search_words(name: str) -> list[str]:
    """Toolbox search words (``tags``) of the algorithm ``name``."""
    return [*SEARCH_WORDS, *ALGORITHM_WORDS.get(name, ())]


def help_url(name: str, display_name: str) -> str:
    """``file://`` URL of the README section headed ``### `fieldcast:name` — display name``.

    The fragment is the heading's anchor as common Markdown renderers make it (lower case, punctuation
    dropped, spaces to hyphens).
    """
    heading = f"fieldcast:{name} — {display_name}".lower()
    anchor = "".join(character for character in heading if character.isalnum() or character in " -")
    return f"{README.as_uri()}#{anchor.replace(' ', '-')}"


HELP_ENTRY = re.compile(r"<dt><b>(.*?)</b></dt><dd>(.*?)</dd>", re.DOTALL)


def help_entries(help_html: str) -> list[tuple[str, str]]:
    """The ``(label, explanation)`` pairs of a help text made by :func:`compose_help`, as plain text."""
    return [(unescape(label), unescape(text)) for label, text in HELP_ENTRY.findall(help_html)]


def parameter_help(help_html: str, description: str) -> str:
    """The explanation, in a help text made by :func:`compose_help`, of the parameter labelled ``description``.

    An entry belongs to a parameter whose label starts with the entry's label, or with one part of a label
    such as "Sample points / Value field"; "" when no entry does.
    """
    for label, text in help_entries(help_html):
        if any(description.startswith(part) for part in label.split(" / ")):
            return text
    return ""

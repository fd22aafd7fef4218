"""Toolbox algorithm 'Predict surfaces for several fields' (fieldcast:predictmany)."""
from __future__ import annotations

import os
import re
from dataclasses import dataclass, replace

import numpy as np
from qgis.core import (
    QgsProcessingException,
    QgsProcessingOutputNumber,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterField,
    QgsProcessingParameterFolderDestination,
)
from qgis.PyQt.QtCore import QVariant

from ..algorithms import (
    Cancelled,
    CovariateSet,
    FieldcastError,
    FitOptions,
    MeanModel,
    Neighbourhood,
    SurfaceScale,
    Transform,
    refuse_local_covariates,
)
from .algorithm_base import progress_callback
from .help_text import (
    BACKTRANSFORM_HELP,
    COVARIATE_HELP,
    ERROR_VARIANCE_HELP,
    FIT_HELP,
    GRID_HELP,
    MAP_AREA_HELP,
    NEIGHBOURHOOD_HELP,
    NONDETECT_HELP,
    NUGGET_HELP,
    PREDICT_TARGET_HELP,
    RASTER_TARGET_CRS_HELP,
    compose_help,
)
from .layer_style import load_styled
from .model_source import describe_document, fit_document, fit_shared_documents, log_fit
from .sample_reader import NonDetects, prepare_samples, read_layer_samples
from .surface_algorithm import SurfaceAlgorithm

FIT_SHARE = 0.4
"""Share of each field's part of the progress bar taken by the fit; kriging and writing take the rest."""

RASTER_KINDS = ("prediction", "variance", "sd")
"""The rasters written per field (kinds of the engine's write_surfaces), each as <field>_<kind>.tif."""

NO_FIELDS = "No value field chosen. Choose one or more numeric fields of the sample layer in 'Value fields' (FIELDS)."


def file_stems(fields: list[str]) -> dict[str, str]:
    """A distinct file-name stem per field: characters other than letters, digits, ``-`` and ``.`` become ``_``.

    Names that clash after this (``"Pb ppm"`` and ``"Pb_ppm"``) get ``_2``, ``_3``, ... in FIELDS order.
    """
    stems: dict[str, str] = {}
    for field in fields:
        stem = re.sub(r"[^\w.-]", "_", field, flags=re.ASCII).strip(".") or "field"
        candidate, number = stem, 1
        while candidate.lower() in {taken.lower() for taken in stems.values()}:
            number += 1
            candidate = f"{stem}_{number}"
        stems[field] = candidate
    return stems


class PredictManyAlgorithm(SurfaceAlgorithm):
    """Fit a model and krige prediction and variance rasters for each of several fields of one layer."""

    FIELDS = "FIELDS"
    SHARED_MODEL = "SHARED_MODEL"
    OUTPUT_FOLDER = "OUTPUT_FOLDER"
    COUNT = "COUNT"
    ICON = "predictmany.svg"

    NAME = "predictmany"
    DISPLAY_NAME = "Predict surfaces for several fields"
    HELP = compose_help(
        "For each chosen field of one point layer: fits a covariance model with the settings below (as 'Fit "
        "covariance model') and kriges its prediction, variance and standard-error rasters (as 'Predict surface' "
        "with that model), writing four files per field into one folder. The same as one fit and one prediction "
        "per field, in one run: fields sampled at the same locations share the grid and mask, and with one "
        "correlation model for all fields also the kriging systems.",
        [("Sample points", "The point layer."),
         ("Value fields", "One or more numeric attributes, or text ones holding numbers and limits such as \"<0.5\" "
          "(read as values below that limit; the log counts them per field). Each field's NULL values are skipped "
          "separately, so the fields may have different samples; samples at one location are averaged."),
         *COVARIATE_HELP,
         *NONDETECT_HELP,
         *FIT_HELP,
         ("One correlation model for all fields", "Off (default): each field gets a model of its own. On: one "
          "correlation model (family, ranges, anisotropy, nugget share) is fitted to all fields jointly, each field "
          "keeping its own sill and mean (the intrinsic correlation model: the fields' log-likelihoods are "
          "summed, each field's scale estimated from its own data). Every field must then have values at the same "
          "samples, and the fit takes up to 2,000 samples. The kriging weights are then the same for every field, "
          "so one kriging pass writes all the rasters: much faster for many fields. Choose it when the fields vary "
          "alike in space (e.g. metals from one source); check it with 'Cross-validate' on a field's model file."),
         *GRID_HELP,
         *MAP_AREA_HELP,
         BACKTRANSFORM_HELP,
         *NEIGHBOURHOOD_HELP,
         NUGGET_HELP,
         ERROR_VARIANCE_HELP,
         PREDICT_TARGET_HELP,
         RASTER_TARGET_CRS_HELP],
        [("Output folder", "Receives, per field, <field>_model.json (the model file, as 'Fit covariance model' "
          "writes it), <field>_prediction.tif, <field>_variance.tif and <field>_sd.tif (Float32 GeoTIFFs as "
          "'Predict surface' writes them: attribute units, the variance of the smooth field in attribute units "
          "squared, and its standard error in attribute units, for a log model the lognormal standard deviation). "
          "Field names are made safe for file names: characters other than letters, digits, '-' and '.' become '_'. "
          "Every field's samples are checked before any file is written. Fields are done one after another, and "
          "all fields' files appear together when the last field is complete: cancelling, or a failure at any "
          "field, leaves none. Run from the dialog, each field's prediction and variance rasters are then "
          "added to the project, named by field and quantity and coloured."),
         ("Count", "Number of fields predicted.")],
    )

    def initAlgorithm(self, config=None):
        self.add_input_parameter()
        self.addParameter(QgsProcessingParameterField(
            self.FIELDS, self.tr("Value fields"), parentLayerParameterName=self.INPUT,
            type=QgsProcessingParameterField.Any, allowMultiple=True))
        self.add_covariate_parameters()
        self.add_nondetect_parameters()
        self.add_fit_parameters()
        self.addParameter(QgsProcessingParameterBoolean(
            self.SHARED_MODEL, self.tr("One correlation model for all fields"), defaultValue=False))
        self.add_grid_parameters()
        self.add_map_area_parameters()
        self.add_backtransform_parameter()
        self.add_neighbourhood_parameters()
        self.add_measurement_parameters()
        self.add_prediction_target_parameter()
        self.add_target_crs_parameter()
        self.addParameter(QgsProcessingParameterFolderDestination(self.OUTPUT_FOLDER, self.tr("Output folder")))
        self.addOutput(QgsProcessingOutputNumber(self.COUNT, self.tr("Number of fields predicted")))

    def checkParameterValues(self, parameters, context):
        """Refuse an empty FIELDS list with advice (before Processing's generic message)."""
        if not self.parameterAsFields(parameters, self.FIELDS, context):
            return False, NO_FIELDS
        return super().checkParameterValues(parameters, context)

    def output_files(self, parameters, context) -> list[tuple[str, str]]:
        """OUTPUT_FOLDER itself and the four files written in it per field."""
        files = super().output_files(parameters, context)
        folder = dict(files).get(self.OUTPUT_FOLDER)
        if not folder:
            return files
        fields = list(dict.fromkeys(self.parameterAsFields(parameters, self.FIELDS, context)))
        return files + [(f"{self.OUTPUT_FOLDER} ({name})", os.path.join(folder, name))
                        for stem in file_stems(fields).values()
                        for name in (f"{stem}_model.json", *(f"{stem}_{kind}.tif" for kind in RASTER_KINDS))]

    def output_folder(self, parameters, context) -> str:
        """OUTPUT_FOLDER, created when missing.

        Raises
        ------
        FieldcastError
            If the folder cannot be created or written to.
        """
        folder = self.parameterAsFileOutput(parameters, self.OUTPUT_FOLDER, context)
        if not folder:
            raise FieldcastError("No output folder given. Choose a folder for the model and raster files.")
        try:
            os.makedirs(folder, exist_ok=True)
        except OSError as exc:
            raise FieldcastError(f"Cannot create the output folder {folder}: {exc.strerror}. Choose a folder you "
                                 "can write to.") from exc
        if not os.access(folder, os.W_OK | os.X_OK):
            raise FieldcastError(f"The output folder {folder} is not writable. Choose a folder where you can save "
                                 "files.")
        return folder

    def chosen_fields(self, parameters, context, source) -> list[str]:
        """FIELDS without repeats (never empty: see :meth:`checkParameterValues`), each checked to be numeric or
        text (numbers and "<x" limits, read by ``read_layer_samples``)."""
        fields = list(dict.fromkeys(self.parameterAsFields(parameters, self.FIELDS, context)))
        for field in fields:
            index = source.fields().lookupField(field)
            if index < 0:
                raise FieldcastError(f"The sample layer has no field {field!r}; choose among its numeric fields.")
            definition = source.fields().at(index)
            if not (definition.isNumeric() or definition.type() == QVariant.String):
                raise FieldcastError(f"Field {field!r} holds {definition.typeName()} values, not numbers or text "
                                     "such as \"<0.5\". Leave it out of 'Value fields', or make a numeric copy "
                                     "with the Field calculator (e.g. to_real(\"field\")).")
        return fields

    def compute(self, parameters, context, feedback) -> dict:
        source = self.parameterAsSource(parameters, self.INPUT, context)
        if source is None:
            raise QgsProcessingException(self.invalidSourceError(parameters, self.INPUT))
        fields = self.chosen_fields(parameters, context, source)
        error_field = self.error_field(parameters, context)
        shared = self.parameterAsBoolean(parameters, self.SHARED_MODEL, context)
        if shared and (error_field or self.fixed_nugget(parameters, context) is not None):
            raise FieldcastError("A model shared by several fields takes each field's own scale, so it is fitted "
                                 "without a fixed nugget or per-sample error variances: leave NUGGET and "
                                 "ERROR_VARIANCE_FIELD empty, or turn off 'One correlation model for all fields' "
                                 "(SHARED_MODEL).")
        folder = self.output_folder(parameters, context)
        transform, settings = self.fit_choices(parameters, context)
        if shared and not transform.complete:
            raise FieldcastError(f"One correlation model for all fields needs one transform for all of them, but "
                                 f"{transform.kind} learns its {'lambda' if transform.kind == 'boxcox' else 'knots'} "
                                 "from each field's values. Give a Box-Cox lambda (BOXCOX_LAMBDA), choose log or none, "
                                 "or turn off 'One correlation model for all fields'.")
        target = self.parameterAsCrs(parameters, self.TARGET_CRS, context)
        template = self.grid_template(parameters, context)
        sources = self.covariate_sources(parameters, context)
        prepared, covariates, transforms = [], [], []
        nondetects = self.nondetects(parameters, context)
        for field in fields:  # every field is checked before any file is written
            layer_samples = read_layer_samples(source, field, target, feedback, template, error_field,
                                               nondetects.field)
            completed, _ = self.complete_transform(layer_samples, transform, settings, sources, feedback)
            samples, described = self.fit_covariates(prepare_samples(layer_samples, completed, feedback, nondetects),
                                                     sources, layer_samples.working, feedback)
            prepared.append((layer_samples, samples))
            covariates.append(described)
            transforms.append(completed)
        run = FieldsRun(prepared, file_stems(fields), folder, transforms, settings,
                        self.neighbourhood(parameters, context),
                        SurfaceScale(transform, self.choice(parameters, self.BACKTRANSFORM, context)), covariates,
                        nondetects)
        first_mean = MeanModel.for_data(settings.mean, prepared[0][1].xy, covariates[0].column_names)
        neighbours, _ = run.neighbourhood.resolved(first_mean, "cell")  # refuse early
        refuse_local_covariates(first_mean, neighbours, len(prepared[0][1].values),
                                local_mean=run.neighbourhood.local_mean)
        if shared:
            self.predict_shared(run, parameters, context, feedback)
        else:
            self.predict_each(run, parameters, context, feedback)
        for field in fields:
            for quantity, path in run.raster_paths(field).items():
                load_styled(context, path, field, quantity)
        feedback.setProgress(100.0)
        return {self.OUTPUT_FOLDER: folder, self.COUNT: len(fields)}

    def predict_each(self, run: FieldsRun, parameters, context, feedback) -> None:
        """A model of its own per field, fitted and kriged field after field (see the help)."""
        grids: dict[tuple[str, bytes], tuple] = {}
        share = 100.0 / len(run.prepared)
        for index, (layer_samples, samples) in enumerate(run.prepared):
            field, start = layer_samples.field, index * share
            try:
                if feedback.isCanceled():
                    raise Cancelled("Cancelled between fields.")
                feedback.pushInfo(f"Field {index + 1} of {len(run.prepared)}: {field}. Fitting with "
                                  f"{run.settings.describe()}.")
                document, result = fit_document(samples.xy, samples.values, run.transforms[index],
                                                layer_samples.working, field, run.settings,
                                                progress_callback(feedback, start, start + FIT_SHARE * share),
                                                feedback.isCanceled, run.covariates[index], samples.covariates,
                                                samples.error_variance, samples.error_field, samples.censored,
                                                self.censoring(layer_samples, samples, run.nondetects))
                log_fit(feedback, samples.xy, samples.values, result, document, field, samples.covariates)
                feedback.pushInfo(describe_document(document))
                samples = self.imputed_samples(samples, document, feedback, spread_included=True)
                added = self.added_variance(parameters, context, document, samples, feedback)
                scale = replace(run.field_scale(index), measurement_variance=added)
                key = (document.crs_wkt, samples.xy.tobytes())
                if key in grids:
                    feedback.pushInfo("Same sample locations as an earlier field: its grid and mask are reused.")
                else:
                    grids[key] = self.grid_and_mask(parameters, context, samples.xy, document.crs_wkt,
                                                    document.units, feedback, n_bands=len(RASTER_KINDS))
                self.krige_surface([document], samples.xy, samples.values, *grids[key], scale, run.neighbourhood,
                                   [(field, run.raster_paths(field))], feedback,
                                   progress_callback(feedback, start + FIT_SHARE * share, start + share),
                                   samples.covariates, self.cell_covariates(parameters, context, document,
                                                                            grids[key][0]), samples.error_variance,
                                   samples.sets)
                document.save(run.model_path(field))
            except Cancelled as exc:
                raise QgsProcessingException(self.tr(f"Cancelled at field {field}: no file was written.")) from exc
            feedback.pushInfo(f"Finished {run.written(field)}; they are saved with the other fields' files at "
                              "the end.")

    def predict_shared(self, run: FieldsRun, parameters, context, feedback) -> None:
        """One correlation model fitted to all fields jointly; one kriging pass writes every field's rasters."""
        fields = [layer_samples.field for layer_samples, _ in run.prepared]
        first = run.prepared[0][1]
        limited = [layer_samples.field for layer_samples, samples in run.prepared if samples.censored_count()]
        if limited:
            raise FieldcastError(
                f"One correlation model for all fields does not take values below a limit, and {limited[0]!r} has "
                "some. Turn off 'One correlation model for all fields' (SHARED_MODEL), or set "
                "NONDETECTS=substitution.")
        for layer_samples, samples in run.prepared[1:]:
            if not np.array_equal(samples.xy, first.xy):
                raise FieldcastError(
                    f"One correlation model for all fields needs every field measured at the same samples, but "
                    f"the samples of {layer_samples.field!r} ({len(samples.xy)} places) are not those of "
                    f"{fields[0]!r} ({len(first.xy)} places): NULL values are skipped field by field. Turn off "
                    "'One correlation model for all fields', or choose fields without gaps.")
        values = np.column_stack([samples.values for _, samples in run.prepared])
        working = run.prepared[0][0].working
        feedback.pushInfo(f"Fitting one correlation model to the {len(fields)} fields jointly with "
                          f"{run.settings.describe()}.")
        try:
            fitted = fit_shared_documents(first.xy, values, run.transforms[0], working, fields, run.settings,
                                          progress_callback(feedback, 0, 100 * FIT_SHARE), feedback.isCanceled,
                                          run.covariates[0], first.covariates)
            for (document, result), field_values in zip(fitted, values.T):
                log_fit(feedback, first.xy, field_values, result, document, document.field, first.covariates)
                feedback.pushInfo(describe_document(document))
            documents = [document for document, _ in fitted]
            grid, inside = self.grid_and_mask(parameters, context, first.xy, working.wkt, working.units, feedback,
                                              n_bands=len(RASTER_KINDS))
            scale = replace(run.scale, measurement_variance=self.added_variance(parameters, context, documents[0],
                                                                                first, feedback))
            self.krige_surface(documents, first.xy, values, grid, inside, scale, run.neighbourhood,
                               [(field, run.raster_paths(field)) for field in fields], feedback,
                               progress_callback(feedback, 100 * FIT_SHARE, 100), first.covariates,
                               self.cell_covariates(parameters, context, documents[0], grid))
        except Cancelled as exc:
            raise QgsProcessingException(self.tr("Cancelled: no file was written.")) from exc
        for document, field in zip(documents, fields):
            document.save(run.model_path(field))
            feedback.pushInfo(f"Finished {run.written(field)}.")


@dataclass(frozen=True)
class FieldsRun:
    """What every field of one run shares: samples per field, file names, settings, and per field the covariates
    its samples describe."""

    prepared: list
    stems: dict[str, str]
    folder: str
    transforms: list[Transform]
    settings: FitOptions
    neighbourhood: Neighbourhood
    scale: SurfaceScale
    covariates: list[CovariateSet]
    nondetects: NonDetects = NonDetects()

    def field_scale(self, index: int) -> SurfaceScale:
        """The output scale of field ``index``: its own transform (a Box-Cox lambda or normal-score knots of its
        own)."""
        return replace(self.scale, transform=self.transforms[index])

    def raster_paths(self, field: str) -> dict[str, str]:
        """The GeoTIFFs of a field, by the kinds of :data:`RASTER_KINDS`."""
        stem = os.path.join(self.folder, self.stems[field])
        return {kind: f"{stem}_{kind}.tif" for kind in RASTER_KINDS}

    def model_path(self, field: str) -> str:
        """The model file of a field."""
        return os.path.join(self.folder, f"{self.stems[field]}_model.json")

    def written(self, field: str) -> str:
        """The file names of a field, for the log."""
        stem = self.stems[field]
        return f"{stem}_model.json, " + ", ".join(f"{stem}_{kind}.tif" for kind in RASTER_KINDS)

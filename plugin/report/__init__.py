"""HTML reports of a model fit and of a cross-validation.

The reports are single self-contained pages: tables rendered with jinja2 and,
when plotly is importable, interactive plots whose JavaScript is embedded in
the page, so a report opens offline. Nothing here imports QGIS; the builders
take engine objects (``FitResult``, ``EmpiricalVariogram``, ``CrossValidation``,
``Samples``, ``ModelDocument``) and write the page atomically:

- :func:`.fit_report.write_fit_report`
- :func:`.crossvalidation_report.write_crossvalidation_report`

This module imports nothing, so loading the plugin stays quick; import the
builders from their modules.
"""

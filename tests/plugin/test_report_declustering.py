"""The fit report's declustering section for a normal-score model of the published Meuse zinc (Rikken & Van Rijn
1993, tests/data/README.md): declustered mean and histogram as the weights give them, the transform named."""
from __future__ import annotations

import numpy as np

from fieldcast.algorithms.fit.declustering import decluster
from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.fit.variogram import empirical_semivariogram
from fieldcast.algorithms.io.model_file import ModelDocument
from fieldcast.algorithms.io.samples import merge_coincident
from fieldcast.algorithms.model.transform import Transform
from fieldcast.plugin.report.fit_report import write_fit_report
from test_report_fit import embedded_data, plot_spec


def test_report_shows_the_declustered_mean_and_histogram(meuse, tmp_path):
    declustering = decluster(meuse.xy, meuse.zinc)
    transform = Transform.normal_score(meuse.zinc, declustering.weights)
    samples = merge_coincident(meuse.xy, transform.forward(meuse.zinc))
    fit = fit_model(samples.xy, samples.values, kernel="spherical", anisotropy=False)
    model = ModelDocument(fit.covariance, fit.mean, fit.coefficients, transform, "EPSG:28992", "metre", "zinc",
                          fit.summary())
    path = tmp_path / "fit.html"
    write_fit_report(path, samples=samples, fit=fit, model=model,
                     variograms=[empirical_semivariogram(samples.xy, samples.values)], crs_name="Amersfoort / RD New",
                     declustering=declustering, attribute_values=meuse.zinc)
    html = path.read_text(encoding="utf-8")
    section = embedded_data(html)["declustering"]
    # The weighted mean and the weighted share per bin written out (numpy.average, numpy.histogram).
    np.testing.assert_allclose(section["declustered_mean"], np.average(meuse.zinc, weights=declustering.weights),
                               rtol=1e-12)
    assert section["raw_mean"] == float(np.mean(meuse.zinc))
    edges = np.asarray(section["histogram"]["edges"])
    shares = np.histogram(meuse.zinc, edges, weights=declustering.weights)[0] / declustering.weights.sum()
    np.testing.assert_allclose(section["histogram"]["declustered"], shares, rtol=1e-12)
    assert [trace["name"] for trace in plot_spec(html, "fc-plot-declustered")["data"]] == ["raw", "declustered"]
    assert "normal scores (" in html and "Declustering" in html

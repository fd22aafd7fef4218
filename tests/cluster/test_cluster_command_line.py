"""The engine's command line (python -m <folder>.algorithms.cluster): one-line refusals with what to change and
exit status 2, no file on a refusal, Dask imported only when asked for, and the folder under any name.

The Meuse samples are the published data set (tests/data/README.md); the model is the project's Meuse log-zinc
model (tests/reference.py).
"""
from __future__ import annotations

import importlib.util
import io
import os
import subprocess
import sys

import numpy as np
import pytest
from cluster_support import EXTENT, PIXEL, job_outputs, same_rasters
from osgeo import gdal

from fieldcast.algorithms import GridJob, Neighbourhood, prepare_job, run_in_process
from fieldcast.algorithms.cluster.cli import main, unresolved_words
from qgis_process_support import COLUMNS, ROWS, TEMPLATE_NODATA, write_template
from repo_package import REPO_ROOT
from requirements_check import skip_unless_available

HAVE_DASK = importlib.util.find_spec("distributed") is not None
FOLDER_NAME = "site_maps_engine"
"""The plugin folder under a name of its own: the command line uses relative imports only."""


def arguments(files, **changes) -> list[str]:
    """A valid command line for the Meuse job, with options changed (value None: left out)."""
    options = {"--model": files.model, "--samples": files.samples, "--field": "zinc",
               "--extent": ",".join(f"{v:g}" for v in EXTENT), "--pixel-size": f"{PIXEL:g}",
               "--out": str(files.folder / "zinc.tif")}
    options.update({name.replace("_", "-") if name.startswith("--") else name: value
                    for name, value in changes.items()})
    return [part for name, value in options.items() if value is not None
            for part in ((name,) if value == "" else (name, value))]


def run_main(argv: list[str]) -> tuple[int, str]:
    """Exit status and printed text of the command line run in this process."""
    stream = io.StringIO()
    try:
        status = main(argv, stream)
    except SystemExit as exit_:  # argparse's refusals, printed on standard error
        status = exit_.code
    return status, stream.getvalue()


REFUSALS = [
    ({"--model": None}, "the following arguments are required: --model. Run python -m"),
    ({"--extent": "1,2,3"}, "is not x_min,y_min,x_max,y_max (four numbers in the model's CRS"),
    ({"--pixel-size": "ten"}, "'ten' is not a number"),
    ({"--workers": "2", "--scheduler": "tcp://127.0.0.1:8786"}, "not allowed with argument"),
    ({"--workers": "0"}, "a Dask cluster needs at least 1 worker. Give 1 or more"),
    ({"--model": "missing.json"}, "Cannot read the model file missing.json"),
    ({"--field": "cobalt"}, "has no field 'cobalt' (--field); its fields are id, zinc"),
    ({"--field": "landuse"}, "not numbers. Choose a numeric field with --field"),
    ({"--layer": "soil"}, "has no layer 'soil' (--layer); its layers are meuse"),
    ({"--exceedance": "exceed.tif"}, "The exceedance raster needs a threshold: give --threshold"),
    ({"--template": "dem.tif"}, "--extent and --pixel-size cannot be given beside it"),
    ({"--pixel-size": "-5"}, "Enter a pixel size larger than zero"),
    ({"--extent": "0,0,900000,900000"}, "or leave --extent empty to use the samples' extent"),
    ({"--neighbours": "1"}, "Set --neighbours to 2 or more"),
    ({"--layout": "vrt"}, "--layout vrt writes the blocks of a Dask run as tiles; give --workers or --scheduler"),
    ({"--layout": "vrt", "--workers": "2"}, "--layout vrt writes each output as a VRT, but --out is"),
    ({"--map-area": "box"}, "argument --map-area: invalid choice: 'box' (choose from 'hull', 'extent')"),
    ({"--extent": "178605,329714,178705,329814", "--hull-margin": "0"},
     "Enlarge --hull-margin, or set --map-area to extent"),  # the lower left corner of the samples' box
]


@pytest.mark.parametrize(("changes", "advice"), REFUSALS, ids=[str(i) for i in range(len(REFUSALS))])
def test_bad_input_gives_one_line_with_advice_and_no_file(job_files, capsys, changes, advice):
    status, text = run_main(arguments(job_files, **changes))
    text += capsys.readouterr().err
    assert status == 2
    assert text.count("\n") == 1 and text.startswith("fieldcast: ") and "Traceback" not in text
    assert advice in text
    assert list(job_files.folder.iterdir()) == []


def test_an_output_on_an_input_is_refused(job_files):
    status, text = run_main(arguments(job_files, **{"--variance": job_files.samples}))
    assert status == 2 and "is the sample file (--samples), which would be lost" in text
    assert os.path.getsize(job_files.samples) > 0 and list(job_files.folder.iterdir()) == []


def test_a_run_writes_the_rasters_and_says_so(job_files):
    status, text = run_main(arguments(job_files, **{"--variance": str(job_files.folder / "zinc_var.tif")}))
    assert status == 0 and text.rstrip().endswith("zinc_var.tif.")
    assert sorted(path.name for path in job_files.folder.iterdir()) == ["zinc.tif", "zinc_var.tif"]


def test_cells_without_enough_neighbours_in_the_search_radius_are_counted(job_files):
    status, text = run_main(arguments(job_files, **{"--neighbours": "8", "--search-radius": "150",
                                                    "--map-area": "extent"}))
    assert status == 0 and "cell(s) are nodata: fewer samples than the mean model needs lie within --search-radius" \
        in text


def run_elsewhere(tmp_path, code_or_module: list[str]) -> subprocess.CompletedProcess:
    """Run Python in a fresh process that sees the repository as the package :data:`FOLDER_NAME`."""
    root = tmp_path / "plugins"
    root.mkdir(exist_ok=True)
    if not (root / FOLDER_NAME).exists():
        (root / FOLDER_NAME).symlink_to(REPO_ROOT, target_is_directory=True)
    return subprocess.run([sys.executable, *code_or_module], cwd=root, capture_output=True, text=True, timeout=300)


def test_a_run_in_one_process_imports_no_dask(job_files, tmp_path):
    code = (f"import sys; from {FOLDER_NAME}.algorithms.cluster.cli import main; "
            f"status = main({arguments(job_files)!r}); "
            "print(status, sorted({name.split('.')[0] for name in sys.modules} & {'dask', 'distributed'}))")
    done = run_elsewhere(tmp_path, ["-c", code])
    assert done.stdout.strip() == "0 []", done.stderr


def test_without_dask_a_dask_run_says_how_to_install_it(job_files, tmp_path):
    code = ("import sys; sys.modules['dask'] = sys.modules['distributed'] = None; "  # as if not installed
            f"from {FOLDER_NAME}.algorithms.cluster.cli import main; "
            f"raise SystemExit(main({arguments(job_files, **{'--workers': '2'})!r}))")
    done = run_elsewhere(tmp_path, ["-c", code])
    assert done.returncode == 2 and done.stderr.count("\n") == 1
    assert "apt install python3-dask python3-distributed" in done.stderr
    assert list(job_files.folder.iterdir()) == []


@skip_unless_available(HAVE_DASK, "dask and distributed are not installed (python3-dask, python3-distributed)")
def test_command_line_on_two_local_workers_equals_one_process(job_files, tmp_path):
    outputs = job_outputs(job_files.folder, "workers")
    options = {"--out": outputs["prediction"], "--sd": outputs["sd"], "--neighbours": "16", "--workers": "2"}
    done = run_elsewhere(tmp_path, ["-m", f"{FOLDER_NAME}.algorithms.cluster", *arguments(job_files, **options)])
    assert done.returncode == 0, done.stderr
    here = job_outputs(job_files.folder, "here")
    run_in_process(prepare_job(GridJob(job_files.model, job_files.samples, "zinc",
                                       {"prediction": here["prediction"], "sd": here["sd"]}, EXTENT, PIXEL,
                                       neighbourhood=Neighbourhood(16))))  # MAP_AREA hull, as the command line
    for kind in ("prediction", "sd"):
        assert same_rasters(outputs[kind], here[kind]), kind


@skip_unless_available(HAVE_DASK, "dask and distributed are not installed (python3-dask, python3-distributed)")
def test_command_line_vrt_layout_on_two_local_workers_equals_one_process(job_files, tmp_path):
    options = {"--out": str(job_files.folder / "zinc.vrt"), "--neighbours": "16", "--workers": "2",
               "--layout": "vrt"}
    done = run_elsewhere(tmp_path, ["-m", f"{FOLDER_NAME}.algorithms.cluster", *arguments(job_files, **options)])
    assert done.returncode == 0, done.stderr
    assert sorted(path.name for path in job_files.folder.iterdir()) == ["zinc.vrt", "zinc_rows0000000.tif"]
    assert 'relativeToVRT="1">zinc_rows0000000.tif<' in (job_files.folder / "zinc.vrt").read_text()
    here = str(job_files.folder / "here.tif")
    run_in_process(prepare_job(GridJob(job_files.model, job_files.samples, "zinc", {"prediction": here}, EXTENT,
                                       PIXEL, neighbourhood=Neighbourhood(16))))
    assert same_rasters(job_files.folder / "zinc.vrt", here)


def test_cells_of_singular_neighbour_systems_are_counted_apart():
    assert "1,200 cell(s) are nodata, 7 of them because their neighbours make a singular system" in \
        unresolved_words(1200, 7)
    assert "singular" not in unresolved_words(1200, 0)


@pytest.mark.parametrize(("kept", "advice"), [
    (None, "Every cell of the template raster template.tif (--template) is nodata, so as a mask it keeps no cell. "
           "Set --template-nodata map to use only its grid"),
    ((slice(0, 10), slice(0, 10)), "No cell of the map area has a value in the template raster template.tif "
                                   "(--template). Give --template-nodata map"),
], ids=["all-nodata", "values-outside-the-hull"])
def test_template_nodata_that_leaves_no_cell_is_refused(job_files, tmp_path, kept, advice):
    template = write_template(tmp_path / "template.tif", nodata_block=False)
    dataset = gdal.Open(template, gdal.GA_Update)
    values = np.full((ROWS, COLUMNS), TEMPLATE_NODATA, dtype=np.int16)
    if kept is not None:  # values only in the north-west corner, outside the samples' hull
        values[kept] = 7
    dataset.GetRasterBand(1).WriteArray(values)
    dataset = None
    status, text = run_main(arguments(job_files, **{"--template": template, "--extent": None,
                                                    "--pixel-size": None}))
    assert status == 2 and advice in text, text
    assert list(job_files.folder.iterdir()) == []

"""Run Fieldcast's toolbox algorithms through ``qgis_process.bin`` with a throwaway QGIS profile.

The profile is a folder used as ``QGIS_CUSTOM_CONFIG_PATH``: the repository is
linked in as the plugin ``fieldcast`` and enabled in ``QGIS3.ini``, so nothing
in the user's own QGIS settings is read or changed. ``qgis_process.bin`` is
used instead of Debian's ``qgis_process`` wrapper, which passes an option that
QGIS 3.22 rejects.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

REPO_ROOT = Path(__file__).resolve().parent.parent
PLUGIN_NAME = "fieldcast"
QGIS_PROCESS = shutil.which("qgis_process.bin")
RUN_TIMEOUT_SECONDS = 900  # a hang guard, not a speed target


def make_profile(root: Path, plugin_folder: Path = REPO_ROOT) -> Path:
    """Create a QGIS profile under ``root`` with ``plugin_folder`` installed and enabled as ``fieldcast``.

    Returns ``root``, the value for ``QGIS_CUSTOM_CONFIG_PATH``.
    """
    profile = root / "profiles" / "default"
    plugins = profile / "python" / "plugins"
    plugins.mkdir(parents=True, exist_ok=True)
    (plugins / PLUGIN_NAME).symlink_to(plugin_folder, target_is_directory=True)
    (profile / "QGIS").mkdir(exist_ok=True)
    (profile / "QGIS" / "QGIS3.ini").write_text(f"[PythonPlugins]\n{PLUGIN_NAME}=true\n", encoding="utf-8")
    return root


@dataclass
class ProcessRun:
    """The outcome of one ``qgis_process.bin --json`` call.

    Attributes
    ----------
    returncode : int
        Exit status; 0 means the algorithm finished.
    document : dict or None
        The parsed JSON written on standard output (None when there was none,
        as after a failed run).
    stderr : str
        Standard error: error messages, warnings and Python tracebacks.
    """

    returncode: int
    document: dict | None
    stderr: str

    @property
    def results(self) -> dict:
        """The algorithm's outputs (``{}`` when the run wrote no JSON)."""
        return (self.document or {}).get("results", {})

    @property
    def messages(self) -> str:
        """Every message of the run as one text: the JSON log (info, warnings, errors) and stderr."""
        log = (self.document or {}).get("log", {})
        lines = [line for entries in log.values() for line in entries]
        return "\n".join(lines + [self.stderr])


def run_qgis_process(profile: Path, *arguments: str) -> ProcessRun:
    """Run ``qgis_process.bin --json ARGUMENTS`` offscreen with the given profile."""
    if QGIS_PROCESS is None:
        raise RuntimeError("qgis_process.bin is not on PATH; install the Debian package qgis.")
    environment = dict(os.environ, QGIS_CUSTOM_CONFIG_PATH=str(profile), QT_QPA_PLATFORM="offscreen")
    completed = subprocess.run(
        [QGIS_PROCESS, "--json", *arguments],
        capture_output=True, text=True, env=environment, timeout=RUN_TIMEOUT_SECONDS, check=False,
    )
    try:
        document = json.loads(completed.stdout)
    except json.JSONDecodeError:
        document = None
    return ProcessRun(completed.returncode, document, completed.stderr)


def run_algorithm(profile: Path, algorithm: str, parameters: dict[str, object]) -> ProcessRun:
    """Run one algorithm (an id such as ``fieldcast:fitmodel`` or a ``.model3`` path) with ``NAME=value`` pairs.

    Booleans are passed as ``true``/``false``; everything else as ``str(value)``.
    """
    pairs = [f"{name}={str(value).lower() if isinstance(value, bool) else value}" for name, value in parameters.items()]
    return run_qgis_process(profile, "run", str(algorithm), "--", *pairs)


def write_fit_then_predict_model(path: Path, fit_parameters: dict, predict_parameters: dict) -> None:
    """Save a graphical model (``.model3``) that chains ``fieldcast:fitmodel`` into ``fieldcast:predict``.

    The model has one input, ``samples`` (the INPUT of both steps); the predict
    step's MODEL is the fit step's OUTPUT_MODEL, a temporary file; the predict
    step's OUTPUT is the model output ``surface``, set on the command line as
    ``predict:surface=PATH``. The other parameters are fixed values. Building the
    model needs a running ``QgsApplication`` in this process.
    """
    from qgis.core import (
        QgsProcessingModelAlgorithm,
        QgsProcessingModelChildAlgorithm,
        QgsProcessingModelChildParameterSource,
        QgsProcessingModelOutput,
        QgsProcessingModelParameter,
        QgsProcessingParameterFeatureSource,
    )

    model = QgsProcessingModelAlgorithm("Fit then predict", "Fieldcast tests")
    model.addModelParameter(QgsProcessingParameterFeatureSource("samples", "Samples"),
                            QgsProcessingModelParameter("samples"))
    samples = QgsProcessingModelChildParameterSource.fromModelParameter("samples")
    fitted_model = QgsProcessingModelChildParameterSource.fromChildOutput("fit", "OUTPUT_MODEL")
    steps = [("fit", "fieldcast:fitmodel", fit_parameters, {}),
             ("predict", "fieldcast:predict", predict_parameters, {"MODEL": fitted_model})]
    for child_id, algorithm, fixed, linked in steps:
        step = QgsProcessingModelChildAlgorithm(algorithm)
        step.setChildId(child_id)
        # one name at a time: setParameterSources with a dict crashes the QGIS 3.22 Python bindings
        step.addParameterSources("INPUT", [samples])
        for name, value in fixed.items():
            step.addParameterSources(name, [QgsProcessingModelChildParameterSource.fromStaticValue(value)])
        for name, source in linked.items():
            step.addParameterSources(name, [source])
        if child_id == "predict":
            surface = QgsProcessingModelOutput("surface", "Surface")
            surface.setChildId(child_id)
            surface.setChildOutputName("OUTPUT")
            step.setModelOutputs({"surface": surface})
        model.addChildAlgorithm(step)
    if not model.toFile(str(path)):
        raise OSError(f"could not write the model file {path}")

#!/usr/bin/env bash
# Fieldcast demo: fit, predict and cross-validate lead in the invented Hollmark Basin survey
# (demo/README.md) through qgis_process.bin, then draw PNG quick looks of the surfaces.
#
#   bash tools/run_demo.sh            # writes demo-output/ in the repository
#   DEMO_OUTPUT=/tmp/x bash tools/run_demo.sh
#
# The plugin runs from a throwaway QGIS profile in a temporary folder, removed on exit.
set -euo pipefail

REPO="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
OUT="${DEMO_OUTPUT:-$REPO/demo-output}"
DATA="$REPO/demo/hollmark_basin.gpkg"
SAMPLES="$DATA|layername=sediment_samples"
BOUNDARY="$DATA|layername=basin_boundary"
PYTHON=/usr/bin/python3  # the interpreter with the QGIS bindings
ACTION_LEVEL=150  # lead, ppm: the invented basin's (invented) action level for dredged sediment

PROFILE="$(mktemp -d -t fieldcast-profile.XXXXXX)"
trap 'rm -rf "$PROFILE"' EXIT
mkdir -p "$PROFILE/profiles/default/python/plugins" "$PROFILE/profiles/default/QGIS" "$PROFILE/runtime"
chmod 700 "$PROFILE/runtime"
ln -s "$REPO" "$PROFILE/profiles/default/python/plugins/fieldcast"
printf '[PythonPlugins]\nfieldcast=true\n' > "$PROFILE/profiles/default/QGIS/QGIS3.ini"
export QGIS_CUSTOM_CONFIG_PATH="$PROFILE" QT_QPA_PLATFORM=offscreen XDG_RUNTIME_DIR="$PROFILE/runtime"
mkdir -p "$OUT"

# run NAME ALGORITHM PARAMETER=VALUE...: runs one algorithm, keeps its JSON answer in $PROFILE/NAME.json
# and prints the messages it logged.
run() {
    local name="$1" algorithm="$2"
    shift 2
    echo "== $algorithm"
    qgis_process.bin --json run "$algorithm" -- "$@" > "$PROFILE/$name.json"
    "$PYTHON" -c 'import json, sys
log = json.load(open(sys.argv[1])).get("log", {})
for kind, lines in log.items():
    for line in lines:
        print(f"   [{kind}] {line}")' "$PROFILE/$name.json"
}

run fit fieldcast:fitmodel INPUT="$SAMPLES" FIELD=lead_ppm TRANSFORM=log KERNEL=auto \
    ANISOTROPY=true TREND=constant METHOD=reml OUTPUT_MODEL="$OUT/model.json" OUTPUT_REPORT="$OUT/fit_report.html"
run predict fieldcast:predict INPUT="$SAMPLES" FIELD=lead_ppm MODEL="$OUT/model.json" \
    EXTENT="$BOUNDARY" PIXEL_SIZE=10 MASK="$BOUNDARY" \
    THRESHOLD="$ACTION_LEVEL" OUTPUT="$OUT/prediction.tif" OUTPUT_VARIANCE="$OUT/variance.tif" \
    OUTPUT_EXCEEDANCE="$OUT/exceedance.tif"
run crossvalidate fieldcast:crossvalidate INPUT="$SAMPLES" FIELD=lead_ppm MODEL="$OUT/model.json" \
    OUTPUT="$OUT/crossvalidation.gpkg" OUTPUT_REPORT="$OUT/crossvalidation_report.html"

echo "== quick looks"
"$PYTHON" "$REPO/tools/quicklook.py" "$OUT/prediction.tif" "$OUT/quicklook.png" \
    --points "$SAMPLES" --boundary "$BOUNDARY" --ramp level \
    --title "Hollmark Basin (invented): lead, ppm - kriging estimate"
"$PYTHON" "$REPO/tools/quicklook.py" "$OUT/variance.tif" "$OUT/quicklook_variance.png" \
    --points "$SAMPLES" --boundary "$BOUNDARY" --ramp spread \
    --title "Hollmark Basin (invented): lead, variance of the estimate, ppm²"
"$PYTHON" "$REPO/tools/quicklook.py" "$OUT/exceedance.tif" "$OUT/quicklook_exceedance.png" \
    --points "$SAMPLES" --boundary "$BOUNDARY" --ramp spread \
    --title "Hollmark Basin (invented): probability that lead exceeds $ACTION_LEVEL ppm"

echo "== summary"
"$PYTHON" - "$OUT" "$PROFILE/crossvalidate.json" "$REPO/tools" <<'EOF'
import json
import sys
from pathlib import Path

out = Path(sys.argv[1])
model = json.loads((out / "model.json").read_text())
print(f"field {model['field']}, transform {model['transform']}, nugget {model['nugget']:.4g}")
for s in model["structures"]:
    print(f"structure {s['family']}: partial sill {s['partial_sill']:.4g}, range {s['range']:.4g} "
          f"(effective {s['effective_range']:.4g}) {model['units']}, azimuth {s['azimuth']:.1f} deg, "
          f"ratio {s['ratio']:.3g}")
sys.path.insert(0, str(Path(sys.argv[3])))
from make_demo_data import TRUE_MEAN_LOG_PPM, true_covariance  # noqa: E402

truth = true_covariance()
for s in truth.structures:
    print(f"true model (demo/README.md): {s.family}, partial sill {s.partial_sill:.4g}, range {s.range:.4g} "
          f"(effective {s.effective_range:.4g}) m, azimuth {s.azimuth:.1f} deg, ratio {s.ratio:.3g}, "
          f"nugget {truth.nugget:.4g}, mean of ln(lead) {TRUE_MEAN_LOG_PPM:.4g}")
fit = model["fit"]
print(f"fit: {fit['method']}, n {fit['n']}, log-likelihood {fit['log_likelihood']:.2f}, AIC {fit['aic']:.2f}")
results = json.load(open(sys.argv[2]))["results"]
print("cross-validation: " + ", ".join(f"{k} {results[k]:.4g}" for k in ("ME", "RMSE", "MSDR", "COVERAGE95")))
print("wrote:")
for path in sorted(out.iterdir()):
    print(f"  {path}  ({path.stat().st_size} bytes)")
EOF

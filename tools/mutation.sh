#!/usr/bin/env bash
# Mutation testing (mutmut 3) of one module group at a time, in a scratch copy of the tree.
#
#   tools/mutation.sh grading|mapping|geometry|attribution [--max-children N]
#   (attribution-trace and attribution-maps split the attribution group in two shorter runs;
#   attribution-methods and attribution-gradcam split attribution-maps in two again;
#   geometry-stack, -grid, -centerline, -sampling and -splat run one geometry file each)
#
# Each group mutates only its own files and runs only the fast tests that exercise them, so a
# run stays bounded on a shared machine (it runs under `nice -n 15`). The scratch copy lives in
# ${MUTATION_DIR:-/tmp/culprit-lens-mutation}/<group>; mutmut writes its `mutants/` folder there,
# never into the worktree. The last lines printed are mutmut's per-status counts and the score
# (killed + timeout) / (all - skipped). Record the result in docs/testing.md.
set -euo pipefail

group="${1:?usage: tools/mutation.sh grading|mapping|geometry|attribution[-trace|-maps] [--max-children N]}"
shift
children=2
if [[ "${1:-}" == "--max-children" ]]; then children="${2:?}"; fi

repo="$(cd "$(dirname "$0")/.." && pwd)"
python="${PYTHON:-$repo/../../main/.venv/bin/python}"
[[ -x "$python" ]] || python="$(command -v python)"
mutmut="$(dirname "$python")/mutmut"

deselect=''
case "$group" in
  grading)
    only='"explain/grading.py"'
    tests='"tests/test_grading.py", "tests/phantom/test_grading.py"' ;;
  mapping)
    only='"explain/mapping.py"'
    tests='"tests/mapping"' ;;
  geometry)
    only='"explain/geometry/*"'
    tests='"tests/geometry"'
    # two checks that start a subprocess or torch for every mutant; the rest cover the same code
    deselect=', "-k", "not imports_without_torch and not tensor_is_the_patient_tensor"' ;;
  geometry-stack|geometry-grid|geometry-centerline|geometry-sampling|geometry-splat)
    # one geometry file alone (_grid.py for geometry-grid), with all of tests/geometry
    file="${group#geometry-}"; [[ "$file" == grid ]] && file=_grid
    only="\"explain/geometry/$file.py\""
    tests='"tests/geometry"'
    deselect=', "-k", "not imports_without_torch and not tensor_is_the_patient_tensor"' ;;
  attribution)
    only='"explain/attribution/*"'
    tests='"tests/attribution", "tests/model/test_wrap.py"'
    # the 7-segment brute force (5040 orders on the whole model) repeats what 1, 3 and 5 check
    deselect=', "--deselect", "tests/attribution/test_trace.py::test_exact_shapley_equals_brute_force_over_permutations[7]"' ;;
  attribution-trace)   # the culprit rule alone, for a shorter run
    only='"explain/attribution/trace.py"'
    tests='"tests/attribution/test_trace.py", "tests/attribution/test_decisions.py", "tests/attribution/test_options.py"'
    deselect=', "--deselect", "tests/attribution/test_trace.py::test_exact_shapley_equals_brute_force_over_permutations[7]"' ;;
  attribution-maps)    # the saliency methods, without trace.py (both groups below)
    only='"explain/attribution/[!t]*.py"'
    tests='"tests/attribution/test_methods.py", "tests/attribution/test_rotation.py", "tests/attribution/test_decisions.py", "tests/attribution/test_options.py", "tests/attribution/test_budget.py", "tests/attribution/test_gradcam_geometry.py", "tests/attribution/test_ig_completeness.py", "tests/attribution/test_occlusion_mm.py", "tests/attribution/test_smoothgrad_range.py", "tests/attribution/test_method_defaults.py", "tests/attribution/test_attribute_batch.py", "tests/model/test_wrap.py"' ;;
  attribution-methods)  # attribution-maps without gradcam.py: IG, occlusion, SmoothGrad, budget...
    only='"explain/attribution/[!tg]*.py", "explain/attribution/gradients.py"'
    tests='"tests/attribution/test_methods.py", "tests/attribution/test_rotation.py", "tests/attribution/test_decisions.py", "tests/attribution/test_options.py", "tests/attribution/test_budget.py", "tests/attribution/test_gradcam_geometry.py", "tests/attribution/test_ig_completeness.py", "tests/attribution/test_occlusion_mm.py", "tests/attribution/test_smoothgrad_range.py", "tests/attribution/test_method_defaults.py", "tests/attribution/test_attribute_batch.py", "tests/model/test_wrap.py"' ;;
  attribution-gradcam)  # gradcam.py alone (layer geometry, offsets)
    only='"explain/attribution/gradcam.py"'
    tests='"tests/attribution/test_methods.py", "tests/attribution/test_rotation.py", "tests/attribution/test_decisions.py", "tests/attribution/test_options.py", "tests/attribution/test_budget.py", "tests/attribution/test_gradcam_geometry.py", "tests/attribution/test_ig_completeness.py", "tests/attribution/test_occlusion_mm.py", "tests/attribution/test_smoothgrad_range.py", "tests/attribution/test_method_defaults.py", "tests/attribution/test_attribute_batch.py", "tests/model/test_wrap.py"' ;;
  *) echo "unknown group '$group': use grading, mapping, geometry or attribution[-trace|-maps|-methods|-gradcam]" >&2; exit 2 ;;
esac

work="${MUTATION_DIR:-/tmp/culprit-lens-mutation}/$group"
rm -rf "$work"
mkdir -p "$work"
cp -r "$repo/explain" "$repo/tests" "$work/"
# The project's pytest settings, plus a mutmut section that names this group's files and tests.
# Doctests stay off here: mutmut selects tests itself, and `testpaths` would pull in the package.
sed -e 's/^addopts = .*/addopts = "-ra --strict-markers --import-mode=importlib -p no:cacheprovider"/' \
    -e 's/^testpaths = .*/testpaths = ["tests"]/' "$repo/pyproject.toml" > "$work/pyproject.toml"
cat >> "$work/pyproject.toml" <<TOML

[tool.mutmut]
source_paths = ["explain"]
only_mutate = [$only]
pytest_add_cli_args = ["-m", "not slow", "-x", "-q"$deselect]
pytest_add_cli_args_test_selection = [$tests]
process_isolation = "forkserver"
use_git_change_detection = false
TOML

cd "$work"
export OMP_NUM_THREADS=1 MKL_NUM_THREADS=1 PYTHONPATH="$work"
nice -n 15 "$mutmut" run --max-children "$children" > run.log 2>&1 || true
tr "\r" "\n" < run.log | tail -n 2
nice -n 15 "$mutmut" results --all true > results.txt 2>&1 || true
"$python" - <<'PY'
import collections, re
counts = collections.Counter()
per_file = collections.defaultdict(collections.Counter)
for line in open("results.txt"):
    m = re.match(r"\s*(explain\S*?)\.x(\S*?)__mutmut_\d+: (.+?)\s*$", line)
    if m:
        counts[m.group(3)] += 1
        per_file[m.group(1)][m.group(3)] += 1
def score(c):
    tested = sum(c.values()) - c["skipped"] - c["not checked"]
    return (c["killed"] + c["timeout"]) / tested * 100 if tested else 0.0, tested
for name, c in sorted(per_file.items()):
    s, n = score(c)
    print(f"{name}: {s:.1f}% of {n} tested ({dict(c)})")
s, n = score(counts)
print(f"TOTAL: {s:.1f}% of {n} tested ({dict(counts)})")
PY

"""The ``culprit-lens`` command line: argument parsing and error-to-exit-code only.

Every error the library raises on purpose (:class:`explain.errors.CulpritLensError`) becomes one
line on stderr and exit status 2, with no traceback; the work itself lives in the library.
"""

from __future__ import annotations

import argparse
import sys

from . import CAUTION, __version__
from .errors import CulpritLensError, InputError
from .interrupt import Terminated, exit_status, signals_as_exceptions

__all__ = ["main", "build_parser"]


def _cmd_phantom(args):
    from .phantom import parse_lesion, write_cohort, write_phantom_case

    if args.count is not None:
        if args.lesion:
            raise InputError("--lesion: give lesions for a single case, or --count for a "
                             "random cohort, not both")
        if args.count < 1:
            raise InputError(f"--count: expected a whole number >= 1, got {args.count}")
        path = write_cohort(args.out, count=args.count, seed=args.seed, force=args.force,
                            image_format=args.image_format)
        print(f"wrote {args.count} phantom cases; cohort table: {path}")
        return 0
    lesions = [parse_lesion(text) for text in args.lesion]
    path = write_phantom_case(args.out, seed=args.seed, lesions=lesions, force=args.force,
                              image_format=args.image_format)
    print(f"wrote phantom case: {path}")
    return 0


def _explain_options(args):
    if args.memory_budget_gb is not None:
        from .attribution.budget import check_budget

        check_budget(args.memory_budget_gb, field="--memory-budget-gb")
    return dict(methods=args.methods, target=args.target, points=args.points, size=args.size,
                pixel_mm=args.pixel_mm, baseline_hu=args.baseline_hu, seed=args.seed,
                memory_budget_gb=args.memory_budget_gb)


def _cmd_explain(args):
    from .case import load_case
    from .report.demo import progress_printer
    from .report.files import check_out_dir

    progress = progress_printer(args.quiet)
    labels = None if args.grade_labels is None else _grade_labels(args.grade_labels)
    # Cheap checks first: a refused output folder, bad options or a bad case fail before any
    # computing.
    check_out_dir(args.out, force=args.force)
    quality = _quality_option(args)
    options = _explain_options(args)
    case = load_case(args.case)
    from .model import load_model
    from .report import explain_case
    from .report.wording import culprit_summary, verdict

    model = load_model(args.model, weights=args.weights, grade_labels=labels)
    explanation = explain_case(model, case, progress=progress, quality=quality,
                               gradcam_layer=args.gradcam_layer, **options)
    html = explanation.write(args.out, force=args.force, progress=progress,
                             dicom=not args.no_dicom)
    print(verdict(explanation.prediction))
    print(culprit_summary(explanation))
    print(f"report: {html}")
    return 0


def _cmd_demo(args):
    from .report.demo import run_demo

    html = run_demo(args.out, seed=args.seed, force=args.force, quiet=args.quiet,
                    image_format=args.image_format, dicom=not args.no_dicom)
    print(f"report: {html}")
    return 0


def _cmd_audit(args):
    from .audit import run_audit

    labels = None if args.grade_labels is None else _grade_labels(args.grade_labels)
    result = run_audit(
        args.cohort, args.model, args.out, workers=args.workers, scheduler=args.scheduler,
        weights=args.weights, grade_labels=labels, force=args.force, quiet=args.quiet,
        **_explain_options(args))
    c = result.summary["counts"]
    print(f"audited {c['rows']} cases: {c['ok']} explained, {c['failed']} failed; "
          f"page: {result.out_dir / 'index.html'}")
    return result.exit_status


def _methods(text):
    return tuple(m.strip() for m in text.split(",") if m.strip())


def _add_explain_options(cmd):
    cmd.add_argument("--methods", type=_methods, default=None,
                     help="comma-separated saliency methods (default: integrated_gradients, "
                          "occlusion and gradcam; one that does not apply to the model is "
                          "skipped with the reason in the report's notes, while a method named "
                          "here that does not apply is an error)")
    cmd.add_argument("--target", default="auto",
                     help="output column index, 'predicted', 'expected', 'auto', or KEY:WHAT "
                          "for dict outputs and INDEX:WHAT for tuple or list outputs (e.g. "
                          "grade:expected, 0:3); default auto: the expected CAD-RADS category "
                          "when the model's grade labels are CAD-RADS categories, else "
                          "predicted: the column with the top score")
    cmd.add_argument("--points", type=int,
                     help="cross-sections per segment (default: the model's spec; a value that "
                          "conflicts with it wins, and the report's notes say so)")
    cmd.add_argument("--size", type=int, help="cross-section size in pixels (default: the "
                                              "model's spec)")
    cmd.add_argument("--pixel-mm", type=float, help="pixel spacing of cross-sections, mm "
                                                    "(default: the model's spec)")
    cmd.add_argument("--baseline-hu", type=float, default=0.0,
                     help="value meaning 'absent' for occlusion, IG and the baseline segment (HU)")
    cmd.add_argument("--seed", type=int, default=0, help="seed for sampled methods (default 0)")
    cmd.add_argument("--memory-budget-gb", type=float, default=None, metavar="GB",
                     help="working memory the model passes may take, in GB (default 0.5); sets "
                          "how many Integrated Gradients steps, occlusion windows and Shapley "
                          "coalitions run per model call. In an audit, each worker keeps to it")


def _flag_thresholds(items):
    """``--flag-threshold NAME=VALUE`` items as a dict (names are checked by check_settings)."""
    out = {}
    for text in items:
        name, _, value = text.partition("=")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            raise InputError(f"--flag-threshold: expected NAME=VALUE with a number, e.g. "
                             f"on_border=0.5, got {text!r}") from None
    return out


def _add_quality_options(cmd):
    """How far to trust the explanation: on by default, its settings, or --no-quality."""
    from .quality import FLAG_THRESHOLDS, QualitySettings

    d = QualitySettings()
    cmd.add_argument("--no-quality", action="store_true",
                     help="skip the quality assessment (localisation, mass shares, flags, "
                          "faithfulness curves)")
    cmd.add_argument("--tolerance-mm", type=float, default=d.tolerance_mm,
                     help=f"pointing tolerance against reference lesions, mm (default {d.tolerance_mm:g})")
    cmd.add_argument("--wall-margin-mm", type=float, default=d.wall_margin_mm,
                     help="added to the lumen radius for 'inside the vessel', mm "
                          f"(default {d.wall_margin_mm:g})")
    cmd.add_argument("--calcium-hu", type=float, default=d.calcium_hu,
                     help=f"pixels above this count as bright calcium, HU (default {d.calcium_hu:g}; "
                          "our own setting, above the enhanced lumen: change it for your protocol)")
    cmd.add_argument("--flag-threshold", action="append", default=[],
                     metavar="NAME=VALUE",
                     help="threshold of one flag (repeatable); flags and defaults: "
                          + ", ".join(f"{k}={v:g}" for k, v in FLAG_THRESHOLDS.items()))


def _quality_option(args):
    """explain_case's ``quality`` from the command line, checked (InputError: exit 2)."""
    from .quality import check_settings

    if args.no_quality:
        return False
    settings = {"tolerance_mm": args.tolerance_mm, "wall_margin_mm": args.wall_margin_mm,
                "calcium_hu": args.calcium_hu}
    if args.flag_threshold:
        settings["flag_thresholds"] = _flag_thresholds(args.flag_threshold)
    check_settings(**settings)
    return settings


def _add_dicom_options(cmd, *, image_format):
    if image_format:
        cmd.add_argument("--image-format", choices=("nifti", "dicom"), default="nifti",
                         help="write the phantom CT as image.nii.gz (default) or as a DICOM CT "
                              "series in ct/ (invented identifiers)")
    cmd.add_argument("--no-dicom", action="store_true",
                     help="do not write overlays/dicom/ (written by default when the CT is a "
                          "DICOM series)")


def _grade_labels(text):
    """``--grade-labels``: one label per output column; an empty item is refused (exit 2)."""
    items = tuple(item.strip() for item in text.split(","))
    for n, item in enumerate(items, 1):
        if not item:
            raise InputError(f"--grade-labels: item {n} of {text!r} is empty; give one label "
                             "per output column, e.g. --grade-labels 0,1,2,3,4A,4B,5")
    return items


def _add_model_options(cmd):
    cmd.add_argument("--model", required=True,
                     help="builtin:reference, a TorchScript file, or FILE.py:FACTORY. A sidecar "
                          "file beside it, <model without suffix>.spec.json (e.g. net.spec.json "
                          "for net.ts or net.py:build), may give {\"points\", \"size\", "
                          "\"pixel_mm\", \"grade_labels\"}; see docs/your-model.md")
    cmd.add_argument("--weights", help="state-dict file for a FILE.py:FACTORY model")
    cmd.add_argument("--grade-labels", metavar="L0,L1,...",
                     help="label of each output column, e.g. 0,1,2,3,4A,4B,5; wins over the "
                          "sidecar file <model>.spec.json (its \"grade_labels\" list) and the "
                          "module's grade_labels. Without labels, reports name output columns, "
                          "never a CAD-RADS category")


def _add_audit_parser(sub):
    aud = sub.add_parser("audit", help="explain every case of a cohort and rank the misgraded "
                                       "ones (local processes or a Dask cluster)")
    aud.add_argument("--cohort", required=True,
                     help="CSV with a 'case' column of case.json paths, relative to the CSV")
    _add_model_options(aud)
    aud.add_argument("--out", required=True,
                     help="output folder: new, empty, or an earlier audit to resume")
    aud.add_argument("--workers", type=int, default=None,
                     help="local worker processes (default: the CPU count; 0: in this process)")
    aud.add_argument("--scheduler", metavar="ADDRESS",
                     help="run on this Dask cluster (e.g. tcp://10.0.0.5:8786) instead")
    _add_explain_options(aud)
    aud.add_argument("--force", action="store_true",
                     help="start again over an earlier audit with other settings")
    aud.add_argument("--quiet", action="store_true", help="no progress bar")
    aud.set_defaults(run=_cmd_audit)


def _degrees(text):
    """``--rotations``: comma-separated angles; parsed in the command so errors are one line."""
    try:
        return tuple(float(a) for a in text.split(",") if a.strip())
    except ValueError:
        raise InputError(f"--rotations: expected comma-separated angles in degrees, e.g. "
                         f"0,90,180,270; got {text!r}") from None


def _sanity_checks(args, progress, *, budget_for_explain=False):
    """Load the case and model and run the sanity checks (nothing is written). The memory
    budget is explain's; the sanity command refuses one it would not use."""
    from .case import load_case
    from .model import load_model
    from .quality.sanity import check_has_parameters
    from .report.sanity_run import run_sanity

    options = _explain_options(args)
    if options.pop("memory_budget_gb") is not None and not budget_for_explain:
        raise InputError("--memory-budget-gb: the sanity checks do not take a memory budget yet; "
                         "leave the option out")
    case = load_case(args.case)
    labels = None if args.grade_labels is None else _grade_labels(args.grade_labels)
    model = load_model(args.model, weights=args.weights, grade_labels=labels)
    check_has_parameters(model)
    return run_sanity(model, case, progress=progress, stability=not args.no_stability,
                      rotations_deg=_degrees(args.rotations), jitter_draws=args.jitter_draws,
                      jitter_rms_mm=args.jitter_mm, **options)


def _print_sanity(check, page):
    for method, passed in check.passed.items():
        word = "no verdict" if passed is None else ("passes" if passed else "FAILS")
        print(f"{method}: {word} (Spearman after full randomisation "
              f"{check.randomisation.final_spearman[method]:.3f})")
    print(f"sanity page: {page}")


def _cmd_sanity(args):
    from .report.demo import progress_printer
    from .report.files import check_out_dir

    check_out_dir(args.out, force=args.force)
    check = _sanity_checks(args, progress_printer(args.quiet))
    _print_sanity(check, check.write(args.out, force=args.force))
    return 0


def _explain_with_sanity(plain_explain):
    """``explain``, and with ``--sanity`` the sanity checks first, written into OUT/sanity/."""
    def run(args):
        if not args.sanity:
            return plain_explain(args)
        from pathlib import Path

        from .report.demo import progress_printer
        from .report.files import check_out_dir

        # Checks and the slow work first; files are written only when all of it is done.
        check_out_dir(args.out, force=args.force)
        check = _sanity_checks(args, progress_printer(args.quiet), budget_for_explain=True)
        status = plain_explain(args)
        _print_sanity(check, check.write(Path(args.out) / "sanity"))
        return status

    return run


def _add_sanity_options(cmd, *, prefix=""):
    cmd.add_argument(f"--{prefix}rotations", dest="rotations", default="0,90,180,270",
                     metavar="DEG,DEG,...",
                     help="rotations about the tangent for the stability check "
                          "(default 0,90,180,270; 0 is the unaugmented run)")
    cmd.add_argument(f"--{prefix}jitter-draws", dest="jitter_draws", type=int, default=3,
                     help="jittered copies of the centerlines (default 3)")
    cmd.add_argument(f"--{prefix}jitter-mm", dest="jitter_mm", type=float, default=0.5,
                     help="RMS lateral shift of the jitter, mm (default 0.5)")
    cmd.add_argument(f"--{prefix}no-stability", dest="no_stability", action="store_true",
                     help="randomisation only, no augmentations")


def _add_sanity_parser(sub):
    """``culprit-lens sanity``, and ``--sanity`` on ``explain`` (call after its parser)."""
    san = sub.add_parser("sanity", help="check that the maps depend on the model's weights "
                                        "(cascading randomisation) and are stable under "
                                        "rotation and centerline jitter (slow)")
    san.add_argument("--case", required=True, help="case.json (format culprit-lens-case/1)")
    _add_model_options(san)
    san.add_argument("--out", required=True, help="output folder (must be new or empty)")
    _add_explain_options(san)
    _add_sanity_options(san)
    san.add_argument("--force", action="store_true", help="replace a non-empty output folder")
    san.add_argument("--quiet", action="store_true", help="no progress messages")
    san.set_defaults(run=_cmd_sanity)

    exp = sub.choices["explain"]
    exp.add_argument("--sanity", action="store_true",
                     help="also run the sanity checks (docs/sanity.md), written into "
                          "OUT/sanity/ (slow)")
    _add_sanity_options(exp, prefix="sanity-")
    exp.set_defaults(run=_explain_with_sanity(exp.get_default("run")))


def build_parser():
    parser = argparse.ArgumentParser(
        prog="culprit-lens",
        description="Explain a max-pooled coronary CT angiography grading model: which segment "
                    "drove the grade, and where along it. " + CAUTION)
    parser.add_argument("--version", action="version", version=f"culprit-lens {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    demo = sub.add_parser("demo", help="make a synthetic case, explain it with the bundled "
                                       "reference model and write the report")
    demo.add_argument("--out", required=True, help="output folder (must be new or empty)")
    demo.add_argument("--seed", type=int, default=0, help="seed of the synthetic case (default 0)")
    demo.add_argument("--force", action="store_true", help="replace a non-empty output folder")
    demo.add_argument("--quiet", action="store_true", help="no progress messages")
    _add_dicom_options(demo, image_format=True)
    demo.set_defaults(run=_cmd_demo)

    exp = sub.add_parser("explain", help="explain one case with a model")
    exp.add_argument("--case", required=True, help="case.json (format culprit-lens-case/1)")
    _add_model_options(exp)
    exp.add_argument("--out", required=True, help="output folder (must be new or empty)")
    _add_explain_options(exp)
    exp.add_argument("--gradcam-layer", metavar="NAME",
                     help="dotted name of the Grad-CAM layer, e.g. encoder.3 (default: the "
                          "module's cam_layer, else its last convolution); its stride and offset "
                          "are worked out from the model's layers where they allow it")
    _add_quality_options(exp)
    exp.add_argument("--force", action="store_true", help="replace a non-empty output folder")
    exp.add_argument("--quiet", action="store_true", help="no progress messages")
    _add_dicom_options(exp, image_format=False)
    exp.set_defaults(run=_cmd_explain)

    _add_audit_parser(sub)
    _add_sanity_parser(sub)

    ph = sub.add_parser("phantom", help="write synthetic CCTA cases with known lesions")
    ph.add_argument("--out", required=True, help="output folder (must be new or empty)")
    ph.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    ph.add_argument("--lesion", action="append", default=[], metavar="ID:PERCENT[:KIND]",
                    help="a lesion on SCCT segment ID narrowing the diameter by PERCENT; KIND is "
                         "calcified or soft (repeatable)")
    ph.add_argument("--count", type=int, help="write this many cases with random lesions and a "
                                              "cohort table instead of one case")
    ph.add_argument("--force", action="store_true", help="replace a non-empty output folder")
    ph.add_argument("--image-format", choices=("nifti", "dicom"), default="nifti",
                    help="the CT as image.nii.gz (default) or as a DICOM CT series in ct/, one "
                         "file per slice, with invented identifiers (patient Phantom^Demo)")
    ph.set_defaults(run=_cmd_phantom)
    return parser


def _one_line(exc):
    """The message on one line, whatever a library below us put into it."""
    return " ".join(line.strip() for line in str(exc).splitlines() if line.strip())


def main(argv=None):
    """Run the command line; returns the exit status.

    Ctrl-C (SIGINT) and SIGTERM end the run with one line on stderr and status 130 or 143
    (128 + the signal number); the staging folder is removed, so no output folder is left.
    """
    with signals_as_exceptions():
        try:
            args = build_parser().parse_args(argv)
            return args.run(args)
        except CulpritLensError as exc:
            print(f"culprit-lens: error: {_one_line(exc)}", file=sys.stderr)
            return 2
        except (FileNotFoundError, PermissionError, IsADirectoryError, NotADirectoryError) as exc:
            print(f"culprit-lens: error: {exc.filename or ''}: {exc.strerror}", file=sys.stderr)
            return 2
        except KeyboardInterrupt as exc:
            print("culprit-lens: interrupted; nothing half-written was kept", file=sys.stderr)
            return exit_status(exc)
        except Terminated as exc:
            print("culprit-lens: terminated (SIGTERM); nothing half-written was kept",
                  file=sys.stderr)
            return exit_status(exc)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

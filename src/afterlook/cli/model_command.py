"""`afterlook model import|export`: bring your own detector in, take the fix back out.

``import`` reads the plain parameter document (JSON or ``.npz``, never a
pickle; :mod:`afterlook.store.parameters_file`) and writes an afterlook model
file; ``export`` writes a model as that document (``--format json``) or as a
scikit-learn Pipeline (``--format sklearn``, a joblib file). The numbers come
from :mod:`afterlook.analysis.interop` and :mod:`afterlook.analysis.sklearn_export`.
"""

from __future__ import annotations

from ..core.errors import EXIT_OK, AfterlookError
from ..analysis import shown
from ..core.printable import printable
from ..store.outputs import check_output
from .inputs import table_options
from .output import emit_json, metrics_lines, saved_model_summary, warn

IMPORT_HELP = ("a model from a Gaussian someone else fitted: mean, covariance (or variances), columns, optional "
               "threshold, derive and transforms, as JSON or .npz (never a pickle)")


def register(sub, add_common, add_table_opts, caution) -> dict:
    group = sub.add_parser("model", help="import a detector's parameters, export a model (JSON, scikit-learn)",
                           epilog=caution)
    actions = group.add_subparsers(dest="model_command", metavar="ACTION", parser_class=type(group))

    p = actions.add_parser("import", help=IMPORT_HELP, description=IMPORT_HELP + ". The file format is "
                           "documented in the README and in afterlook-parameters.schema.json.", epilog=caution)
    p.add_argument("params", metavar="PARAMS", help="parameter document: .json or .npz")
    p.add_argument("--out", required=True, metavar="MODEL", help="model file to write (JSON)")
    p.add_argument("--force", action="store_true", help="replace an existing afterlook model file at --out")
    p.add_argument("--cases", metavar="CASES", help="labelled cases on which to pick the threshold")
    p.add_argument("--threshold", help="f1 | rate:R | value:V, overriding the file's threshold (default: the "
                                       "file's; else f1 with labelled cases; else rate:0.01 of the model's own "
                                       "Gaussian)")
    p.add_argument("--undefined", choices=("flag", "skip"),
                   help="a case whose feature is undefined on finite readings: flag it as outside the feature's "
                        "domain or leave it unscored (default: the file's 'undefined', else flag)")
    add_table_opts(p)
    add_common(p)

    p = actions.add_parser("export", help="write a model as a scikit-learn pipeline or the plain parameter document",
                           epilog=caution)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("--format", required=True, choices=("sklearn", "json"),
                   help="sklearn: a joblib file of a scikit-learn Pipeline; json: the document model import reads")
    p.add_argument("--out", required=True, metavar="FILE", help="file to write (.joblib for sklearn, .json for json)")
    p.add_argument("--force", action="store_true", help="replace an existing file of the same kind at --out")
    add_common(p)
    return {"model": run}


def run(args) -> int:
    if args.model_command == "import":
        return run_import(args)
    if args.model_command == "export":
        return run_export(args)
    raise AfterlookError("model: choose an action: import or export (see 'afterlook model --help')")


def run_import(args) -> int:
    from ..analysis.interop import model_from_parameters_document
    from ..core.thresholds import parse_policy
    from ..store.parameters_file import read_parameters
    from ..store.tables import load_table

    check_output(args.out, kind="model", inputs=[args.params, args.cases], force=args.force)
    policy = parse_policy(args.threshold) if args.threshold else None
    doc = read_parameters(args.params)
    cases = load_table(args.cases, **table_options(args), require_labels=True) if args.cases else None
    if args.undefined:
        doc = {**doc, "undefined": args.undefined}
    model = model_from_parameters_document(doc, threshold=policy, cases=cases,
                                           source=f"parameter file {args.params}")
    model.save(args.out)
    summary, quality = saved_model_summary(model, args.out, cases, imported_from=model.imported["source"])
    if args.json:
        emit_json(summary)
        return EXIT_OK
    from . import render

    out = render.console()
    out.print(render.model_line(model, args.out))
    out.print(printable(f"imported from {args.params}: {len(model.features)} features "
                        f"({', '.join(model.features)}); threshold chosen on {model.threshold_basis}"))
    for line in metrics_lines(summary, quality, args.cases):
        out.print(line, markup=False)
    return EXIT_OK


def run_export(args) -> int:
    from ..analysis.model import load_model

    kind = "pipeline" if args.format == "sklearn" else "parameters"
    check_output(args.out, kind=kind, inputs=[args.model], force=args.force)
    model = load_model(args.model)
    if args.format == "json":
        from ..analysis.interop import parameters_document
        from ..store.model_file import write_json_atomic

        write_json_atomic(parameters_document(model), args.out)
    else:
        from ..analysis.sklearn_export import write_pipeline

        write_pipeline(model, args.out)
    doc = {"model": args.model, "format": args.format, "out": args.out, "features": model.features,
           "threshold": model.threshold, "fingerprint": model.fingerprint()}
    if args.json:
        emit_json(doc)
        return EXIT_OK
    print(printable(f"wrote {args.out}: {'a scikit-learn pipeline' if kind == 'pipeline' else 'the parameter document'}"
                    f" of {args.model} ({len(model.features)} features, threshold {shown.threshold(model.threshold)})"))
    return EXIT_OK

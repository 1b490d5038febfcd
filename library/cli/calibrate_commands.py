"""`olibra calibrate`: learn blend weights from observed similarity, grouped cross-validation, store."""

from __future__ import annotations

import json

from library.cli.catalogue_commands import open_catalogue
from library.cli.output import DEMO_EVIDENCE_HELP, FORMATS, emit


def cmd_calibrate(args) -> int:
    from library.errors import OlibraError
    from library.search import calibration

    catalogue = open_catalogue(args)
    result = calibration.calibrate(catalogue, args.observed, name=args.name, folds=args.folds, seed=args.seed,
                                   include_demo=args.include_demo)
    try:
        calibration.store(catalogue, result)
    except ValueError as exc:
        raise OlibraError(str(exc)) from None
    if args.format == "json":
        print(json.dumps(calibration.as_json(result), indent=2))
        return 0
    rows = [{"metric": name, "weight": result.weights.get(name), "cv_spearman": value}
            for name, value in result.mean_spearman.items()]
    emit(rows, ["metric", "weight", "cv_spearman"], args.format)
    print(f"stored as metric {result.name!r} (use `olibra search --metric {result.name}`); "
          f"{result.pairs} observed pairs over {result.materials} materials, {len(result.folds)} folds grouped by "
          f"material (fit on pairs among training materials, Spearman on pairs among held-out materials); "
          f"left out: {result.left_out}")
    return 0


def register(commands) -> None:
    p = commands.add_parser("calibrate")
    p.add_argument("--observed", required=True, metavar="SET|descriptors",
                   help="observed similarity: 'descriptors' (odor descriptor Jaccard) or an observation set")
    p.add_argument("--name", help="name of the stored metric (default calibrated-SOURCE)")
    p.add_argument("--folds", type=int, default=5)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--include-demo", action="store_true", help=DEMO_EVIDENCE_HELP)
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_calibrate)

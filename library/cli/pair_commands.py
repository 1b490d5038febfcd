"""Pair class commands: `olibra pairs classes|test|class add|class remove`."""

from __future__ import annotations

import json

from library.cli.catalogue_commands import open_catalogue
from library.cli.output import DEMO_EVIDENCE_HELP, FORMATS, emit

BH_NOTE = ("q: Benjamini-Hochberg adjusted over every class x metric tested together; "
           "gap: class mean percentile under the metric minus under the observations (percent points)")


def test_rows(tests) -> list[dict]:
    rows = []
    for test in tests:
        for r in test.results:
            rows.append({"class": test.pair_class.name, "pairs": len(test.pairs), "metric": r.metric,
                         "class_median": r.class_median, "catalogue_median": r.catalogue_median,
                         "median_percentile": r.median_percentile, "mann_whitney_p": r.mann_whitney_p,
                         "mann_whitney_q": r.mann_whitney_q, "observed_pairs": r.observed_pairs,
                         "gap": r.gap, "gap_p": r.gap_p, "gap_q": r.gap_q, "agrees": r.agrees})
    return rows


def tests_json(tests) -> dict:
    return {"multiple_testing": "Benjamini-Hochberg over classes x metrics (J. R. Stat. Soc. B 57, 289 (1995))",
            "observed": tests[0].observed_label if tests else None,
            "catalogue_pairs": tests[0].catalogue_pairs if tests else 0,
            "left_out": "overlay and handedness (scored per pair from conformers; too slow for catalogue-wide "
                        "distributions)",
            "classes": [{"name": t.pair_class.name, "description": t.pair_class.description,
                         "reaction": t.pair_class.reaction, "pairs": [list(p) for p in t.pairs]} for t in tests],
            "results": test_rows(tests)}


def cmd_pairs(args) -> int:
    from library.catalogue import pair_class_store
    from library.search import pair_classes

    catalogue = open_catalogue(args)
    if args.action == "class":
        with catalogue.transaction() as session:
            if args.class_action == "add":
                pair_class_store.add_class(session, args.name, args.reaction, args.description)
            else:
                pair_class_store.remove_class(session, args.name)
        print(f"pair class {args.name!r} {'added' if args.class_action == 'add' else 'removed'}")
        return 0
    if args.action == "classes":
        rows = [{"name": c.name, "pairs": len(pairs), "reaction": c.reaction, "description": c.description}
                for c, pairs in pair_classes.list_classes(catalogue)]
        emit(rows, ["name", "pairs", "reaction", "description"], args.format)
        return 0
    names = None if args.name == "all" else [args.name]
    tests = pair_classes.run_tests(catalogue, names, observed=args.observed, permutations=args.permutations,
                                   include_demo=args.include_demo)
    if args.format == "json":
        print(json.dumps(tests_json(tests), indent=2, default=str))
        return 0
    emit(test_rows(tests), ["class", "metric", "pairs", "class_median", "catalogue_median", "median_percentile",
                            "mann_whitney_q", "observed_pairs", "gap", "gap_q", "agrees"], args.format)
    print(BH_NOTE)
    return 0


def register(commands) -> None:
    p = commands.add_parser("pairs")
    actions = p.add_subparsers(dest="action", metavar="ACTION", required=True)
    listing = actions.add_parser("classes", help="list pair classes and how many catalogue pairs each holds")
    listing.add_argument("--format", choices=FORMATS, default="table")
    test = actions.add_parser("test", help="how each metric scores a class, against the catalogue and observations")
    test.add_argument("name", metavar="CLASS", help="a class name, or 'all' (adjusted over every class x metric)")
    test.add_argument("--observed", default="descriptors", metavar="SET|descriptors",
                      help="observed similarity: odor descriptor Jaccard (default) or an observation set")
    test.add_argument("--permutations", type=int, default=999)
    test.add_argument("--include-demo", action="store_true", help=DEMO_EVIDENCE_HELP)
    test.add_argument("--format", choices=FORMATS, default="table")
    manage = actions.add_parser("class", help="add or remove a user pair class")
    manage_actions = manage.add_subparsers(dest="class_action", metavar="add|remove", required=True)
    add = manage_actions.add_parser("add", help="store a class defined by a reaction SMARTS")
    add.add_argument("name")
    add.add_argument("--reaction", required=True, metavar="SMARTS", help="one-reactant reaction SMARTS, A>>B")
    add.add_argument("--description")
    remove = manage_actions.add_parser("remove", help="remove a stored class")
    remove.add_argument("name")
    p.set_defaults(handler=cmd_pairs)

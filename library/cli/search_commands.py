"""Search commands: search, compare, disagreements, flag, flags, observations, scorecard."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from library import functional_groups
from library.catalogue import curation, observations, restrictions
from library.catalogue.transfer import ImportFileError
from library.cli.catalogue_commands import open_catalogue
from library.cli.output import DEMO_EVIDENCE_HELP, FORMATS, emit
from library.errors import OlibraError
from library.search import metrics
from library.search.disagreements import DIRECTIONS, VIBRATION_SIDE_METRICS, sides_with_tally, tally_lines
from library.search.pairs import compare
from library.search.substitutes import (
    CAUTION,
    DEFAULT_RERANK_DEPTH,
    RERANK_POOL,
    SearchOutcome,
    build_filter,
    find_substitutes,
)
from library.vibration import engines


def _range(values):
    return None if values is None else (values[0], values[1])


def store_query(catalogue, args) -> str:
    """Add the query structure to the catalogue with its records; returns the key to search by."""
    from library import computations
    from library.catalogue import jobs

    draft = curation.draft_material(args.query, name=args.store_as,
                                    sources={"structure": args.source, "preferred_name": args.source})
    with catalogue.transaction() as session:
        outcome = curation.add_material(session, draft)
    print(outcome.message)
    plan = computations.Plan(vibration_engine=args.engine)
    stamps = computations.stamps(plan)
    report = jobs.run(catalogue, stamps, computations.worker(plan),
                      jobs.select_materials(catalogue, stamps, keys=[str(outcome.material.id)]), processes=1)
    if report.failures:
        raise OlibraError(f"the structure was stored but its records failed: {report.failures[0][2]}")
    return str(outcome.material.id)


def check_terms(catalogue, args) -> None:
    """Refuse odor terms outside the vocabulary, with the same message as the web."""
    if not (args.with_odor or args.without_odor):
        return
    with catalogue.reading() as session:
        known = set(curation.vocabulary(session))
    where = "`olibra vocabulary list`"
    curation.check_odor_terms(args.with_odor or (), known, label="--with-odor", where=where)
    curation.check_odor_terms(args.without_odor or (), known, label="--without-odor", where=where)


def _preset_groups(catalogue, names) -> list[str]:
    """The groups the presets `names` avoid, as the catalogue's curators keep them."""
    from library.catalogue import base_preset_store

    if not names:
        return []
    with catalogue.reading() as session:
        return base_preset_store.groups_of(session, names)


def cmd_search(args) -> int:
    catalogue = open_catalogue(args)
    if args.store_as:
        args.query = store_query(catalogue, args)
    check_terms(catalogue, args)
    filters = build_filter(
        mw_range=_range(args.mw), logp_range=_range(args.logp), must_have=args.with_odor or (),
        must_not_have=args.without_odor or (), include_retired=args.include_retired,
        include_restricted=args.include_restricted)
    outcome = find_substitutes(
        catalogue, args.query, metric=args.metric, weight=args.weight, k=args.k, filters=filters,
        rerank_depth=args.rerank_depth, explain=args.explain, vibration_engine=args.engine,
        include_demo=args.include_demo, with_groups=args.with_group or (),
        without_groups=list(args.without_group or ()) + list(_preset_groups(catalogue, args.stable_in)),
        include_own_family=args.include_own_family)
    with catalogue.reading() as session:
        tags = restrictions.tags_by_id(session, [c.material.id for c in outcome.candidates])
    print_substitutes(outcome, fmt=args.format, explain=args.explain, rerank_depth=args.rerank_depth,
                      regulatory=tags)
    return 0


def print_substitutes(outcome: SearchOutcome, *, fmt: str = "table", explain: bool = False,
                      rerank_depth: int = DEFAULT_RERANK_DEPTH, regulatory: dict[int, str] | None = None) -> None:
    """Candidates with every metric's score and rank (table: 'score (rank)'), and the restriction tags
    curators recorded (`regulatory`: {material id: tags})."""
    regulatory = regulatory or {}
    rows = []
    for c in outcome.candidates:
        row = {"rank": c.rank, "id": c.material.id, "name": c.material.name,
               "odor": ", ".join(c.material.odors), "smiles": c.material.smiles,
               "ordered_by": outcome.ordered_by, "groups": ", ".join(functional_groups.groups_of(c.material.smiles)),
               "regulatory": regulatory.get(c.material.id, "")}
        for metric in metrics.names():
            if metric in c.scores:
                if fmt == "table":
                    row[metric] = f"{c.scores[metric]:.3f} ({c.ranks.get(metric, '-')})"
                else:
                    row[metric] = round(c.scores[metric], 4)
                    row[f"{metric}_rank"] = c.ranks.get(metric)
        if c.explanation:
            row.update(_explanation_fields(c.explanation))
        rows.append(row)
    present = [m for m in metrics.names() if any(m in r for r in rows)]
    columns = ["rank", "id", "name"] + present
    if fmt != "table":
        columns += [f"{m}_rank" for m in present] + ["ordered_by", "odor", "groups", "smiles", "regulatory"]
    else:
        columns += ["odor", "regulatory"]
    if explain:
        columns += ["volume_ratio", "bands_matched", "bands_unmatched"]
    if fmt == "table":
        weight_text = f", shape weight {outcome.weight}" if outcome.metric == "blend" else ""
        print(f"substitutes for {outcome.query.label} by {outcome.metric}{weight_text} "
              f"(list ordered by {outcome.ordered_by}):")
    emit(rows, columns, fmt)
    if fmt == "table":
        if outcome.metric == "shape" and rerank_depth:
            print(f"(of the top {RERANK_POOL * rerank_depth} by moments, the {rerank_depth} with the most "
                  "alike conformer pair are ordered by Gaussian overlay; the rest follow without it)")
        print("each cell: similarity (0-1) and, in brackets, the candidate's rank under that metric")
        for note in outcome.notes:
            print(f"note: {note}")
        print(f"caution: {outcome.caution}")
        if any(row["regulatory"] for row in rows):
            print(f"regulatory: {restrictions.DISCLAIMER}")


def _explanation_fields(explanation: dict) -> dict:
    bands = explanation["bands"]
    return {"volume_ratio": round(explanation["volume_ratio"], 3),
            "bands_matched": len(bands.pairs), "bands_unmatched": len(bands.unmatched_a) + len(bands.unmatched_b)}


def band_lines(bands, limit: int | None) -> tuple[list[str], int]:
    """Matched and unmatched main bands in order of position (cm-1), each with its diagnostic group
    when it has one, for printing; and how many were left out by `limit` (None or 0: none)."""
    def group(*found):
        labels = sorted({b.label for b in found if b.label})
        return f"  [{', '.join(labels)}]" if labels else ""
    lines = [(a.position_cm1, f"{a.position_cm1:7.0f} ~ {b.position_cm1:7.0f}  matched{group(a, b)}")
             for a, b in bands.pairs]
    lines += [(a.position_cm1, f"{a.position_cm1:7.0f} ~       -  only in the first{group(a)}")
              for a in bands.unmatched_a]
    lines += [(b.position_cm1, f"      - ~ {b.position_cm1:7.0f}  only in the second{group(b)}")
              for b in bands.unmatched_b]
    ordered = [text for _, text in sorted(lines)]
    if not limit or limit >= len(ordered):
        return ordered, 0
    return ordered[:limit], len(ordered) - limit


def cmd_compare(args) -> int:
    catalogue = open_catalogue(args)
    result = compare(catalogue, args.a, args.b, weight=args.weight, vibration_engine=args.engine)
    bands = result.explanation["bands"]
    if args.format == "json":
        print(json.dumps({
            "a": {"id": result.a.id, "name": result.a.name}, "b": {"id": result.b.id, "name": result.b.name},
            "scores": result.scores, "blend_weight": result.weight,
            "spreads": result.spreads, "resamples": result.resamples,
            "overlay_tversky": result.explanation["overlay_tversky"],
            "volume_ratio": result.explanation["volume_ratio"],
            "bands": bands.to_dict()}, indent=2, default=float))
        return 0
    print(f"#{result.a.id} {result.a.name}  vs  #{result.b.id} {result.b.name}")
    for metric, value in result.scores.items():
        spread = result.spreads.get(metric)
        noise = f"  ± {spread:.4f}" if spread is not None else ""
        print(f"  {metric:<17} {value:.4f}{noise}")
    if result.spreads:
        fixed = ", ".join(result.not_resampled)
        print(f"  (± one standard deviation over {result.resamples} conformer resamples"
              + (f"; not resampled: {fixed})" if fixed else ")"))
    print(f"  (blend weight {result.weight}; overlay Tversky {result.explanation['overlay_tversky']:.4f}, "
          f"volume ratio {result.explanation['volume_ratio']:.3f})")
    print(f"  main bands matched within {bands.tolerance_cm1:g} cm-1: {len(bands.pairs)} "
          f"(band score {bands.score:.3f}); only in {result.a.name}: {len(bands.unmatched_a)}; "
          f"only in {result.b.name}: {len(bands.unmatched_b)}")
    shown, left_out = band_lines(bands, args.bands)
    for line in shown:
        print(f"    {line}")
    if left_out:
        print(f"    ... {left_out} more band(s) not shown (--bands 0 lists every band)")
    print(f"caution: {CAUTION}")
    return 0


def cmd_disagreements(args) -> int:
    from library.search.disagreement_policy import describe_thresholds, find_disagreement_rows, resolved_thresholds

    catalogue = open_catalogue(args)
    observation = None if args.observed == "none" else args.observed
    from library.search.catalogue_index import load_index

    cat_index = load_index(catalogue, **({"vibration_engine": args.engine} if args.engine else {}))
    thresholds = dict(min_shape=args.min_shape, max_vibration=args.max_vibration,
                      min_vibration=args.min_vibration, max_shape=args.max_shape)
    resolved = resolved_thresholds(cat_index, **thresholds, vibration_metric=args.vibration_metric)
    used = describe_thresholds(resolved, vibration_metric=args.vibration_metric)
    rows, label = find_disagreement_rows(  # the similarities the percentiles resolved to, sampled once
        catalogue, k=args.neighbors, **{name: value for name, (value, _) in resolved.items()}, direction=args.direction,
        observation=observation, include_retired=args.include_retired, cat_index=cat_index,
        vibration_metric=args.vibration_metric)
    table = []
    for r in rows[: args.limit]:
        p = r.pair
        table.append({"direction": p.direction, "basis": r.basis, "a": f"#{r.a.id} {r.a.name}", "b": f"#{r.b.id} {r.b.name}",
                      "gap": round(p.score, 4), "shape": round(p.shape, 4), "vibration": round(p.vibration, 4),
                      "handedness": None if p.handedness is None else round(p.handedness, 4),
                      "within_noise": r.within_noise,
                      "structure": None if p.structure is None else round(p.structure, 4),
                      "observed": None if p.observed is None else round(p.observed, 3),
                      "sides_with": p.sides_with, "flags": "; ".join(r.flags)})
    emit(table, ["direction", "basis", "a", "b", "gap", "shape", "vibration", "handedness", "within_noise",
                 "structure", "observed", "sides_with", "flags"], args.format)
    if args.format == "table":
        print(f"{len(rows)} pair(s) found, {len(table)} shown"
              + (f"; observed similarity: {label}" if label else ""))
        print(f"thresholds: {used}")
        if args.vibration_metric != "vibration":
            print(f"the vibration column is the {args.vibration_metric} metric")
        if args.vibration_metric == "tunnelling":
            from library.vibration.tunnelling import MODEL_NOTE

            print(f"note: {MODEL_NOTE}")
        for line in tally_lines(sides_with_tally([r.pair for r in rows])):
            print(line)
    return 0


def cmd_flag(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.transaction() as session:
        a = curation.find_material(session, args.a)
        b = curation.find_material(session, args.b)
        flag = observations.flag_pair(session, a, b, kind=args.kind, note=args.note)
        print(f"flagged #{a.id} {a.preferred_name} and #{b.id} {b.preferred_name}: {flag.kind}")
    return 0


def cmd_flags(args) -> int:
    catalogue = open_catalogue(args)
    with catalogue.reading() as session:
        rows = [{"a": f"#{f.material_a.id} {f.material_a.preferred_name}",
                 "b": f"#{f.material_b.id} {f.material_b.preferred_name}", "kind": f.kind, "note": f.note,
                 "by": f.created_by, "at": f"{f.created_at:%Y-%m-%d %H:%M}"}
                for f in observations.list_flags(session)]
    emit(rows, ["a", "b", "kind", "note", "by", "at"], args.format)
    return 0


def cmd_observations(args) -> int:
    catalogue = open_catalogue(args)
    path = Path(args.file)
    if not path.is_file():
        raise ImportFileError(f"{path} does not exist or is not a file")
    with catalogue.sessions() as session:
        with session.begin() as outer:
            report = observations.import_observations(
                session, path.read_bytes(), path.name, set_name=args.set, kind=args.kind, source=args.source,
                unit=args.unit, description=args.description, replace=args.replace)
            if not report.stored:
                outer.rollback()
    for problem in report.problems:
        print(problem)
    print(report.summary())
    return 0 if report.stored else 1


def cmd_observation_sets(args) -> int:
    catalogue = open_catalogue(args)
    if args.action == "delete":
        with catalogue.transaction() as session:
            removed = observations.delete_set(session, args.name)
        print(f"data set {args.name.strip()!r} deleted ({removed} value(s))")
        return 0
    with catalogue.reading() as session:
        rows = [{"name": s.name, "kind": s.kind, "materials": s.materials, "values": s.values, "unit": s.unit or "",
                 "source": s.source, "description": s.description or ""}
                for s in observations.set_summaries(session)]
    emit(rows, ["name", "kind", "materials", "values", "unit", "source", "description"], args.format)
    return 0


def cmd_scorecard(args) -> int:
    from library.search import scorecard  # on use: it imports scipy.stats
    from library.search.evidence import run_scorecard

    catalogue = open_catalogue(args)
    report, label, notes = run_scorecard(
        catalogue, observation=args.observed, k=args.k, permutations=args.permutations,
        resamples=args.resamples, weight=args.weight, vibration_engine=args.engine, control_size=args.control_size,
        include_demo=args.include_demo)
    data = scorecard.report_json(report)
    if args.format == "json":
        json.dump({"observed": label, **data, "notes": notes}, sys.stdout, indent=2)
        print()
        return 0
    k = report.scores[0].k
    rows = [{"metric": m["metric"], "materials": m["materials"], "pairs": m["pairs"], "spearman": m["spearman"],
             "mantel_p": m["mantel_p"], "mantel_p_holm": m["mantel_p_holm"], "ci_low": m["ci_low"],
             "ci_high": m["ci_high"], "partial_r": m["partial_r"], "partial_p": m["partial_p"],
             "partial_p_holm": m["partial_p_holm"], f"precision_at_{k}": m["precision_at_k"],
             f"chance_at_{k}": m["chance_at_k"], "lift": m["lift_at_k"]} for m in data["metrics"]]
    if args.format == "table":
        controls = ", ".join(next((s.controls for s in report.scores if s.controls), ())) or "nothing"
        print(f"observed similarity: {label}; Spearman over pairs, one-sided Mantel p "
              f"({args.permutations} permutations), {int(report.scores[0].confidence * 100)} % bootstrap interval; "
              f"partial Mantel controls for {controls}; p-values adjusted by Holm over each column; chance: "
              f"expected precision at {k} under random neighbors")
    emit(rows, list(rows[0]), args.format)
    if args.format == "table":
        print()
        for line in report.summary:
            print(line)
    for note in notes:
        print(f"note: {note}", file=sys.stderr)
    return 0


def cmd_metrics(args) -> int:
    rows = [{"metric": m.name, "orders_searches": "yes" if m.indexed else "no (scored on demand)",
             "built_from": ", ".join(m.components) or "-", "needs_records": ", ".join(m.records) or "-",
             "description": m.description} for m in metrics.metrics()]
    emit(rows, ["metric", "orders_searches", "built_from", "needs_records", "description"], args.format,
         max_width=100)
    return 0


def cmd_groups(args) -> int:
    """The functional-group vocabulary (name, SMARTS) and the base presets (groups each avoids)."""
    from library.catalogue import base_preset_store

    catalogue = open_catalogue(args)
    if args.action == "preset":
        with catalogue.transaction() as session:
            if args.preset_action == "save":
                saved = base_preset_store.save_preset(session, args.name, args.avoid, why=args.why,
                                                      source=args.source)
                print(f"base preset {saved.name!r} saved: avoids {', '.join(saved.groups)}")
            else:
                restored = base_preset_store.remove_preset(session, args.name)
                print(f"base preset {args.name.strip()!r} removed"
                      + ("; the built-in version is in effect again" if restored else ""))
        return 0
    rows = [{"group": name, "smarts": smarts, "description": text}
            for name, (smarts, text) in functional_groups.VOCABULARY.items()]
    emit(rows, ["group", "smarts", "description"], args.format, max_width=100)
    with catalogue.reading() as session:
        found = base_preset_store.presets(session)
    presets = [{"base": p.name, "avoids": ", ".join(p.groups), "why": p.why, "source": p.source,
                "kept": "built in" if p.builtin and not p.edited else "edited" if p.builtin else "curators'"}
               for p in found]
    if args.format == "table":
        print()
    emit(presets, ["base", "avoids", "why", "source", "kept"], args.format, max_width=100)
    if args.format == "table":
        print("presets are rules of thumb for --stable-in, not stability findings: test each candidate in the base")
    return 0


def cmd_spectrum(args) -> int:
    from library.search.spectra import material_spectrum
    from library.vibration.plot import draw_spectrum

    catalogue = open_catalogue(args)
    name, spectrum = material_spectrum(catalogue, args.material, vibration_engine=args.engine)
    other, labels = None, (name, "")
    if args.against:
        other_name, other = material_spectrum(catalogue, args.against, vibration_engine=args.engine)
        labels = (name, other_name)
    try:
        path = draw_spectrum(spectrum, args.out, other=other, sigma_cm1=args.sigma, labels=labels,
                             intensity_weighting="ir" if args.ir else "none",
                             title=f"{name} ({args.engine}, sigma {args.sigma:g} cm-1)")
    except OSError as exc:
        raise OlibraError(f"cannot write {args.out}: {exc.strerror}") from None
    print(f"wrote {path}")
    return 0


def _add_common(p, *, weight=True, fmt=True) -> None:
    p.add_argument("--engine", choices=engines.keys(), default=engines.DEFAULT_ENGINE,
                   help=f"vibration engine of the records (default {engines.DEFAULT_ENGINE})")
    if weight:
        p.add_argument("--weight", type=float, default=metrics.DEFAULT_WEIGHT,
                       help=f"shape weight w of the blend (0-1, default {metrics.DEFAULT_WEIGHT})")
    if fmt:
        p.add_argument("--format", choices=FORMATS, default="table")


def register(commands) -> None:
    p = commands.add_parser("search")
    p.add_argument("query", help="material (name, id, CAS RN, InChIKey) or a structure (SMILES, InChI)")
    p.add_argument("--metric", default="blend", metavar="METRIC",
                   help="; ".join(f"{m.name}: {m.description}" for m in metrics.metrics(indexed=True))
                   + "; or the name of a metric stored by `olibra calibrate`")
    p.add_argument("-k", type=int, default=10, help="number of candidates (default 10)")
    p.add_argument("--mw", type=float, nargs=2, metavar=("LOW", "HIGH"), help="molecular weight range, g/mol")
    p.add_argument("--logp", type=float, nargs=2, metavar=("LOW", "HIGH"), help="computed logP range")
    p.add_argument("--with-odor", nargs="+", metavar="TERM", help="candidates must have these descriptors")
    p.add_argument("--without-odor", nargs="+", metavar="TERM", help="candidates must not have these")
    p.add_argument("--with-group", nargs="+", metavar="GROUP",
                   help="candidates must have these functional groups (names from `olibra groups`, or SMARTS)")
    p.add_argument("--without-group", nargs="+", metavar="GROUP",
                   help="candidates must not have these functional groups (names or SMARTS)")
    p.add_argument("--stable-in", nargs="+", metavar="BASE",
                   help="leave out the groups a base preset avoids (see `olibra groups`; common practice)")
    p.add_argument("--include-own-family", action="store_true",
                   help="keep the query's own stereoisomers, isotopologues and mixture isomers")
    p.add_argument("--include-retired", action="store_true")
    p.add_argument("--include-restricted", action="store_true")
    p.add_argument("--include-demo", action="store_true",
                   help="let demo entries (invented odor notes, e.g. the deuterated isotopologues) be listed")
    p.add_argument("--rerank-depth", type=int, default=DEFAULT_RERANK_DEPTH,
                   help="shape metric: order this many candidates by Gaussian overlay (default "
                        f"{DEFAULT_RERANK_DEPTH}; 0: moments only)")
    p.add_argument("--explain", action="store_true", help="add volume ratio and band matching per candidate")
    p.add_argument("--store-as", metavar="NAME",
                   help="a new structure is added to the catalogue under NAME (with its records) before the search")
    p.add_argument("--source", default="from memory", help="with --store-as: provenance of the structure")
    _add_common(p)
    p.set_defaults(handler=cmd_search)

    p = commands.add_parser("compare")
    p.add_argument("a")
    p.add_argument("b")
    p.add_argument("--bands", type=int, default=0, help="band lines to print (default 0: every band)")
    _add_common(p, fmt=False)
    p.add_argument("--format", choices=("table", "json"), default="table")
    p.set_defaults(handler=cmd_compare)

    p = commands.add_parser("disagreements")
    p.add_argument("--direction", choices=("both",) + DIRECTIONS, default="both")
    for option, default in (("--min-shape", "0.9"), ("--max-vibration", "0.6"), ("--min-vibration", "0.9"),
                            ("--max-shape", "0.6")):
        p.add_argument(option, default=default, metavar="SIMILARITY|pNN",
                       help=f"a similarity in 0-1 or a percentile of the catalogue's pairs, e.g. p95 "
                            f"(default {default})")
    p.add_argument("--neighbors", type=int, default=20, help="neighbor-list length per material (default 20)")
    p.add_argument("--observed", default="descriptors",
                   help="observed similarity: 'descriptors' (default), a data set name, or 'none'")
    p.add_argument("--include-retired", action="store_true")
    p.add_argument("--limit", type=int, default=50)
    p.add_argument("--vibration-metric", choices=VIBRATION_SIDE_METRICS, default="vibration",
                   help="the metric that speaks for the vibration hypothesis (default vibration: EVA fingerprints; "
                        "tunnelling: the receptor model)")
    _add_common(p, weight=False)
    p.set_defaults(handler=cmd_disagreements)

    p = commands.add_parser("metrics")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_metrics)

    p = commands.add_parser("groups")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_groups, action="list")
    actions = p.add_subparsers(dest="action")
    preset = actions.add_parser("preset", help="save or remove a base preset (curators' version of the rules)")
    preset_actions = preset.add_subparsers(dest="preset_action", required=True)
    q = preset_actions.add_parser("save", help="store a preset, or replace the one of that name (built-in ones too)")
    q.add_argument("name", help="the product base, e.g. 'hypochlorite bleach'")
    q.add_argument("--avoid", nargs="+", required=True, metavar="GROUP",
                   help="functional groups the base attacks: names from `olibra groups` or SMARTS")
    q.add_argument("--why", help="what the base does to those groups")
    q.add_argument("--source", help="where the rule comes from (default: common practice, no source)")
    q.set_defaults(handler=cmd_groups)
    q = preset_actions.add_parser("remove", help="remove a stored preset (a built-in one comes back)")
    q.add_argument("name")
    q.set_defaults(handler=cmd_groups)

    p = commands.add_parser("spectrum")
    p.add_argument("material")
    p.add_argument("--out", required=True, help="file to write, .svg or .png")
    p.add_argument("--against", metavar="MATERIAL", help="draw a second material mirrored below")
    p.add_argument("--sigma", type=float, default=10.0, help="smoothing width, cm-1 (default 10)")
    p.add_argument("--ir", action="store_true", help="weight by IR intensity (gfn2 records only)")
    _add_common(p, weight=False, fmt=False)
    p.set_defaults(handler=cmd_spectrum)

    p = commands.add_parser("flag")
    p.add_argument("a")
    p.add_argument("b")
    p.add_argument("--kind", required=True, choices=observations.FLAG_KINDS)
    p.add_argument("--note")
    p.set_defaults(handler=cmd_flag)

    p = commands.add_parser("flags")
    p.add_argument("--format", choices=FORMATS, default="table")
    p.set_defaults(handler=cmd_flags)

    p = commands.add_parser("observations")
    actions = p.add_subparsers(dest="action", required=True)
    q = actions.add_parser("import", help="import a data set from CSV (all or nothing, with a per-row report)")
    q.add_argument("file")
    q.add_argument("--set", required=True, help="name of the data set")
    q.add_argument("--kind", choices=observations.OBSERVATION_KINDS, default="panel profile")
    q.add_argument("--source", required=True, help="provenance, e.g. 'measured: in-house panel, 2026-05'")
    q.add_argument("--unit")
    q.add_argument("--description")
    q.add_argument("--replace", action="store_true", help="replace a data set of the same name")
    q.set_defaults(handler=cmd_observations)
    q = actions.add_parser("list", help="the stored data sets with their counts")
    q.add_argument("--format", choices=FORMATS, default="table")
    q.set_defaults(handler=cmd_observation_sets)
    q = actions.add_parser("delete", help="delete a data set and its values (audited)")
    q.add_argument("name")
    q.set_defaults(handler=cmd_observation_sets)

    p = commands.add_parser("scorecard")
    p.add_argument("--observed", default="descriptors", help="'descriptors' (default) or a data set name")
    p.add_argument("-k", type=int, default=5, help="k of precision at k (default 5)")
    p.add_argument("--permutations", type=int, default=999)
    p.add_argument("--resamples", type=int, default=1000)
    p.add_argument("--control-size", action="store_true",
                   help="the partial Mantel test also controls for molecular size (closeness of molecular weight)")
    p.add_argument("--include-demo", action="store_true", help=DEMO_EVIDENCE_HELP)
    _add_common(p)
    p.set_defaults(handler=cmd_scorecard)

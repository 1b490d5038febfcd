"""Shared by the search pages and their JSON API: reading the request's arguments into core calls,
and shaping the core's answers into plain rows (for tables, CSV and JSON). No chemistry here.

Every argument problem raises OlibraError with a message that names the field and says
what to give instead; the pages show it above the form, the API answers 400 with it.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

from flask import Response

from library import functional_groups
from library.catalogue import curation, restrictions
from library.catalogue.transfer import spreadsheet_safe
from library.errors import OlibraError
from library.catalogue import observations
from library.search import disagreement_policy, evidence, metrics, pairs, queries, spectra, substitutes
from library.search.disagreements import DIRECTIONS, VIBRATION_SIDE_METRICS, check_vibration_metric, parse_threshold
from webui import db_session, search_index, web_state
from webui.heavy import heavy

MAX_KEY_CHARS = 200
MAX_STRUCTURE_CHARS = 20_000
MAX_K = 100
MAX_NEIGHBORS = 100
DISAGREEMENTS_PER_PAGE = 25
SCORECARD_DEFAULTS = {"permutations": 199, "resamples": 200, "k": 5}
# Per request on the web (the CLI `olibra scorecard` has no such limit); above: 400 naming the limit.
SCORECARD_LIMITS = {"permutations": 999, "resamples": 1000, "k": 50}
DISAGREEMENT_SORTS = ("rank", "direction", "basis", "a", "b", "gap", "shape", "vibration", "structure", "observed",
                      "sides_with")


class ArgumentError(OlibraError, ValueError):
    """A form field or API argument that cannot be used as given."""


def text_argument(args, name: str, label: str, *, limit: int = MAX_KEY_CHARS) -> str:
    value = (args.get(name) or "").strip()
    if len(value) > limit:
        raise ArgumentError(f"{label} is {len(value)} characters long; use at most {limit}")
    return value


def number_argument(args, name: str, label: str, *, default: float | None = None, low: float | None = None,
                    high: float | None = None, integer: bool = False, example: str = "") -> float | None:
    """A number from the request (None/default when empty), checked against [low, high]."""
    text = (args.get(name) or "").strip()
    if not text:
        return default
    try:
        value = int(text) if integer else float(text)
    except ValueError:
        kind = "a whole number" if integer else "a number"
        raise ArgumentError(f"{label} {text[:30]!r} is not {kind}; give {kind}{example}") from None
    if not math.isfinite(value):
        raise ArgumentError(f"{label} must be a finite number, not {text[:30]!r}")
    if (low is not None and value < low) or (high is not None and value > high):
        allowed = (f"{low:g} to {high:g}" if low is not None and high is not None
                   else f"{low:g} or more" if low is not None else f"{high:g} or less")
        raise ArgumentError(f"{label} {text[:30]} is outside the allowed {allowed}")
    return value


def range_argument(args, prefix: str, label: str, unit: str) -> tuple[float, float] | None:
    """(low, high) from PREFIX_min and PREFIX_max; one side alone leaves the other open."""
    low = number_argument(args, f"{prefix}_min", f"{label} minimum", example=f" ({unit})")
    high = number_argument(args, f"{prefix}_max", f"{label} maximum", example=f" ({unit})")
    if low is None and high is None:
        return None
    low = -math.inf if low is None else low
    high = math.inf if high is None else high
    if low > high:
        raise ArgumentError(f"{label} range {low:g} to {high:g} is empty: the minimum is above the maximum; "
                            "swap the two values")
    return low, high


def flag_argument(args, name: str) -> bool:
    return (args.get(name) or "").strip().lower() in ("1", "on", "true", "yes")


def groups_argument(args, name: str) -> list[str]:
    """Functional groups (vocabulary names or SMARTS) separated by ';' or given repeatedly; each checked."""
    values = args.getlist(name) if hasattr(args, "getlist") else [args.get(name) or ""]
    groups = [g.strip() for v in values for g in v.split(";") if g.strip()]
    for group in groups:
        try:
            functional_groups.pattern(group)
        except functional_groups.GroupError as exc:
            raise ArgumentError(str(exc)) from None
    return groups


def terms_argument(args, name: str, label: str, vocabulary: set[str]) -> list[str]:
    """Odor descriptors separated by commas (or given repeatedly); each must be in the vocabulary."""
    values = args.getlist(name) if hasattr(args, "getlist") else [args.get(name) or ""]
    terms = [t.strip().lower() for v in values for t in str(v).split(",") if t.strip()]
    try:
        return curation.check_odor_terms(terms, vocabulary, label=label,
                                         where="the Vocabulary page, separated by commas")
    except curation.CurationError as exc:
        raise ArgumentError(str(exc)) from None


def vocabulary() -> set[str]:
    catalogue = web_state().catalogue

    def load():
        with catalogue.reading() as session:
            return set(curation.vocabulary(session))
    return web_state().index_cache.memo(("vocabulary",), load)


def observation_sources() -> list[str]:
    """'descriptors' and the names of the stored observation data sets (memoized per revision)."""
    catalogue = web_state().catalogue
    return ["descriptors"] + web_state().index_cache.memo(
        ("observation sets",), lambda: _set_names(catalogue))


def _set_names(catalogue) -> list[str]:
    with catalogue.reading() as session:
        return observations.set_names(session)


# ---------------------------------------------------------------- substitutes


@dataclass
class SubstituteRequest:
    material: str = ""
    structure: str = ""
    metric: str = "blend"
    weight: float = 0.5
    k: int = 10
    mw_range: tuple[float, float] | None = None
    logp_range: tuple[float, float] | None = None
    must_have: list[str] = field(default_factory=list)
    must_not_have: list[str] = field(default_factory=list)
    include_retired: bool = False
    include_restricted: bool = False
    with_groups: list[str] = field(default_factory=list)
    without_groups: list[str] = field(default_factory=list)
    include_own_family: bool = False

    @property
    def query_text(self) -> str:
        return self.structure or self.material

    @property
    def asked(self) -> bool:
        return bool(self.query_text)


def substitute_request(args) -> SubstituteRequest:
    metric = (args.get("metric") or "blend").strip()
    if metric not in metrics.names(indexed=True):
        search_index()  # loading the index registers the catalogue's calibrated metrics
    if metric not in metrics.names(indexed=True):
        raise ArgumentError(f"metric {metric[:30]!r} is not one of {', '.join(metrics.names(indexed=True))}")
    must_have = must_not_have = []
    if args.get("with") or args.get("without"):
        known = vocabulary()
        must_have = terms_argument(args, "with", "must have", known)
        must_not_have = terms_argument(args, "without", "must not have", known)
        both = sorted(set(must_have) & set(must_not_have))
        if both:
            raise ArgumentError(f"{', '.join(both)} cannot be both required and excluded; remove it from one list")
    with_groups = groups_argument(args, "with_group")
    without_groups = groups_argument(args, "without_group")
    bases = [b for b in args.getlist("stable_in") if b.strip()] if hasattr(args, "getlist") else []
    if bases:
        from library.catalogue import base_preset_store

        try:
            without_groups += base_preset_store.groups_of(db_session(), bases)
        except OlibraError as exc:
            raise ArgumentError(str(exc)) from None
    return SubstituteRequest(
        with_groups=with_groups, without_groups=without_groups,
        include_own_family=flag_argument(args, "own_family"),
        material=text_argument(args, "material", "the material"),
        structure=text_argument(args, "structure", "the structure", limit=MAX_STRUCTURE_CHARS),
        metric=metric,
        weight=number_argument(args, "weight", "blend weight", default=0.5, low=0.0, high=1.0,
                               example=" from 0 (vibration only) to 1 (shape only)"),
        k=int(number_argument(args, "k", "number of candidates", default=10, low=1, high=MAX_K, integer=True)),
        mw_range=range_argument(args, "mw", "molecular weight", "g/mol"),
        logp_range=range_argument(args, "logp", "logP", "computed logP"),
        must_have=must_have, must_not_have=must_not_have,
        include_retired=flag_argument(args, "retired"), include_restricted=flag_argument(args, "restricted"))


def material_keys() -> dict[str, frozenset[int]]:
    catalogue = web_state().catalogue
    return web_state().index_cache.memo(("material keys",), lambda: queries.material_keys(catalogue))


def resolve_query(text: str, cat_index):
    """The query for `text`: an indexed material found in the in-memory key table when the key names
    exactly one; otherwise the core's full resolution (structures, ambiguous keys, clear errors)."""
    return (queries.resolve_known_key(text, material_keys(), cat_index)
            or queries.resolve_query(web_state().catalogue, text, cat_index))


def find_substitutes(request: SubstituteRequest):
    """(SearchOutcome, CatalogueIndex) for a checked request, from the in-memory index; shape searches
    (overlay re-ranking) run in the heavy pool."""
    if request.metric == "shape":
        return heavy("the shape search", lambda: _substitutes(request))
    return _substitutes(request)


def _substitutes(request: SubstituteRequest):
    cat_index, _ = search_index()
    filters = substitutes.build_filter(mw_range=request.mw_range, logp_range=request.logp_range,
                                       must_have=request.must_have, must_not_have=request.must_not_have,
                                       include_retired=request.include_retired,
                                       include_restricted=request.include_restricted)
    query = resolve_query(request.query_text, cat_index)
    outcome = substitutes.find_substitutes(web_state().catalogue, query, metric=request.metric,
                                           weight=request.weight, k=request.k, filters=filters, cat_index=cat_index,
                                           with_groups=request.with_groups, without_groups=request.without_groups,
                                           include_own_family=request.include_own_family)
    return outcome, cat_index


def preview_points(cat_index, material_id: int) -> str | None:
    """SVG polyline points of a material's spectrum preview, kept with the index (one string per material)."""
    from webui import charts

    cache = web_state().index_cache.memo(("previews",), dict)
    if material_id not in cache:
        curve = spectra.fingerprint_curve(cat_index, material_id)
        cache[material_id] = None if curve is None else charts.preview_points(*curve)
    return cache[material_id]


def regulatory_tags(outcome) -> dict[int, str]:
    """{material id: the restriction entries curators recorded, as tags} for an outcome's candidates."""
    with web_state().catalogue.reading() as session:
        return restrictions.tags_by_id(session, [c.material.id for c in outcome.candidates])


def candidate_row(candidate, regulatory: dict[int, str] | None = None) -> dict:
    m = candidate.material
    row = {"rank": candidate.rank, "id": m.id, "name": m.name, "cas": m.cas_rn, "score": round(candidate.score, 4)}
    for metric in metrics.names():
        if metric in candidate.scores:
            row[metric] = round(candidate.scores[metric], 4)
            row[f"{metric}_rank"] = candidate.ranks.get(metric)
    row.update(odors=list(m.odors), molecular_weight=round(m.molecular_weight, 3), logp=round(m.logp, 3),
               status=m.status, restricted=m.restricted, regulatory=(regulatory or {}).get(m.id, ""),
               smiles=m.smiles, functional_groups=list(functional_groups.groups_of(m.smiles)))
    return row


def outcome_json(outcome) -> dict:
    query = outcome.query
    tags = regulatory_tags(outcome)
    return {"query": {"label": query.label, "material_id": query.material_id, "smiles": query.smiles},
            "metric": outcome.metric, "ordered_by": outcome.ordered_by, "blend_weight": outcome.weight,
            "candidates": [candidate_row(c, tags) for c in outcome.candidates],
            "notes": outcome.notes, "caution": outcome.caution}


# ---------------------------------------------------------------- compare


def compare(args):
    a = text_argument(args, "a", "the first material")
    b = text_argument(args, "b", "the second material")
    weight = number_argument(args, "weight", "blend weight", default=0.5, low=0.0, high=1.0,
                             example=" from 0 to 1")
    if not a or not b:
        raise ArgumentError("give two materials to compare (name, synonym, CAS RN, InChIKey or id)")

    def work():
        cat_index, _ = search_index()
        return pairs.compare(web_state().catalogue, a, b, weight=weight, cat_index=cat_index)
    return heavy("the comparison", work)


def comparison_json(result) -> dict:
    def material(info):
        return {"id": info.id, "name": info.name, "cas": info.cas_rn, "smiles": info.smiles, "odors": list(info.odors)}
    return {"a": material(result.a), "b": material(result.b),
            "scores": {k: round(v, 4) for k, v in result.scores.items()}, "blend_weight": result.weight,
            "overlay_tanimoto": round(result.explanation["overlay_tanimoto"], 4),
            "overlay_tversky": round(result.explanation["overlay_tversky"], 4),
            "volume_ratio": round(result.explanation["volume_ratio"], 4),
            "handedness": round(result.explanation["handedness"], 4),
            "spreads": {k: round(v, 4) for k, v in result.spreads.items()}, "resamples": result.resamples,
            "bands": result.explanation["bands"].to_dict(), "caution": substitutes.CAUTION}


# ---------------------------------------------------------------- disagreements


@dataclass(frozen=True)
class DisagreementRequest:
    # each a similarity in 0-1 or a percentile of the catalogue's pairs ('p95')
    min_shape: float | str = 0.9
    max_vibration: float | str = 0.6
    min_vibration: float | str = 0.9
    max_shape: float | str = 0.6
    k: int = 20
    direction: str = "both"
    observation: str = "descriptors"
    include_retired: bool = False
    vibration_metric: str = "vibration"


def disagreement_request(args) -> DisagreementRequest:
    def similarity(name, label, default):
        raw = text_argument(args, name, label, limit=30)
        if not raw:
            return default
        try:
            return parse_threshold(raw, label)
        except ValueError as exc:
            raise ArgumentError(str(exc)) from None
    direction = (args.get("direction") or "both").strip()
    if direction not in ("both",) + DIRECTIONS:
        raise ArgumentError(f"direction {direction[:30]!r} is not one of both, {', '.join(DIRECTIONS)}")
    observation = (args.get("observation") or "descriptors").strip()
    if observation not in ("none", *observation_sources()):
        raise ArgumentError(f"observation source {observation[:60]!r} is neither 'descriptors', 'none' nor a "
                            "stored data set; import the data set first")
    return DisagreementRequest(
        min_shape=similarity("min_shape", "minimum shape similarity", 0.9),
        max_vibration=similarity("max_vibration", "maximum vibration similarity", 0.6),
        min_vibration=similarity("min_vibration", "minimum vibration similarity", 0.9),
        max_shape=similarity("max_shape", "maximum shape similarity", 0.6),
        k=int(number_argument(args, "k", "neighbors per material", default=20, low=1, high=MAX_NEIGHBORS,
                              integer=True, example=" from 1 to 100")),
        direction=direction, observation=observation, include_retired=flag_argument(args, "retired"),
        vibration_metric=vibration_side_argument(args))


def vibration_side_argument(args) -> str:
    """The metric that scores the vibration side of the disagreement list (default EVA)."""
    name = (args.get("vibration_metric") or "vibration").strip()
    try:
        return check_vibration_metric(name)
    except ValueError:
        raise ArgumentError(f"vibration side {name[:30]!r} is not one of {', '.join(VIBRATION_SIDE_METRICS)}") from None


def find_disagreements(request: DisagreementRequest):
    """(rows, observed label), memoized per catalogue revision and thresholds."""
    def work():
        cat_index, _ = search_index()
        return disagreement_policy.find_disagreement_rows(
            web_state().catalogue, k=request.k, min_shape=request.min_shape, max_vibration=request.max_vibration,
            min_vibration=request.min_vibration, max_shape=request.max_shape, direction=request.direction,
            observation=None if request.observation == "none" else request.observation,
            include_retired=request.include_retired, cat_index=cat_index, vibration_metric=request.vibration_metric)

    def compute():
        return heavy("the disagreement list", work, key=("disagreements", request, search_index()[1]))
    return web_state().index_cache.memo(("disagreements", request), compute)


def thresholds_used(request: DisagreementRequest) -> str:
    """The thresholds of a request as similarities, percentiles resolved ('shape >= 0.912 (p90 ...)')."""
    cat_index, _ = search_index()
    return disagreement_policy.describe_thresholds(disagreement_policy.resolved_thresholds(
        cat_index, min_shape=request.min_shape, max_vibration=request.max_vibration,
        min_vibration=request.min_vibration, max_shape=request.max_shape, vibration_metric=request.vibration_metric),
        vibration_metric=request.vibration_metric)


def disagreement_row(row) -> dict:
    p = row.pair
    return {"direction": p.direction, "basis": row.basis,
            "a": {"id": row.a.id, "name": row.a.name}, "b": {"id": row.b.id, "name": row.b.name},
            "gap": round(p.score, 4), "shape": round(p.shape, 4), "vibration": round(p.vibration, 4),
            "handedness": None if p.handedness is None else round(p.handedness, 4),
            "within_noise": row.within_noise,
            "structure": None if p.structure is None else round(p.structure, 4),
            "observed": None if p.observed is None else round(p.observed, 4),
            "sides_with": p.sides_with, "flags": list(row.flags)}


def sort_rows(rows: list, sort: str, order: str) -> list:
    """Rows sorted by a column; empty values last whatever the order."""
    if sort not in DISAGREEMENT_SORTS:
        raise ArgumentError(f"cannot sort by {sort[:30]!r}; choose one of {', '.join(DISAGREEMENT_SORTS)}")
    if order not in ("asc", "desc"):
        raise ArgumentError(f"order {order[:10]!r} must be asc or desc")
    if sort == "rank":
        return list(rows) if order == "asc" else list(reversed(rows))

    def value(row):
        p = row.pair
        return {"direction": p.direction, "basis": row.basis, "a": row.a.name.lower(), "b": row.b.name.lower(),
                "gap": p.score, "shape": p.shape, "vibration": p.vibration, "structure": p.structure,
                "observed": p.observed, "sides_with": p.sides_with}[sort]
    present = [r for r in rows if value(r) is not None]
    missing = [r for r in rows if value(r) is None]
    return sorted(present, key=value, reverse=order == "desc") + missing


def page_argument(args, total: int, per_page: int) -> tuple[int, int]:
    """(page, pages); a page past the end is a clear error."""
    pages = max(1, math.ceil(total / per_page))
    page = int(number_argument(args, "page", "page", default=1, low=1, high=10**9, integer=True,
                               example=" such as 1, 2, 3"))
    if page > pages:
        raise ArgumentError(f"page {page} is past the last page, {pages}")
    return page, pages


# ---------------------------------------------------------------- scorecard


@dataclass(frozen=True)
class ScorecardRequest:
    observation: str = "descriptors"
    permutations: int = SCORECARD_DEFAULTS["permutations"]
    resamples: int = SCORECARD_DEFAULTS["resamples"]
    k: int = SCORECARD_DEFAULTS["k"]
    include_demo: bool = False


def scorecard_request(args) -> ScorecardRequest:
    observation = (args.get("observation") or "descriptors").strip()
    if observation not in observation_sources():
        raise ArgumentError(f"observation source {observation[:60]!r} is neither 'descriptors' nor a stored "
                            "data set; import the data set first")
    values = {}
    for name, label in (("permutations", "permutations"), ("resamples", "bootstrap resamples"),
                        ("k", "k of precision at k")):
        value = int(number_argument(args, name, label, default=SCORECARD_DEFAULTS[name], low=1, integer=True,
                                    example=f" from 1 to {SCORECARD_LIMITS[name]}"))
        if value > SCORECARD_LIMITS[name]:
            raise ArgumentError(f"{label} {value} is above this server's limit of {SCORECARD_LIMITS[name]} per "
                                f"request; ask for at most {SCORECARD_LIMITS[name]}, or run `olibra scorecard` "
                                "for more")
        values[name] = value
    return ScorecardRequest(observation, **values, include_demo=flag_argument(args, "demo"))


def run_scorecard(request: ScorecardRequest):
    """(scorecard.Scorecard, observed label, notes), memoized per catalogue revision and arguments."""
    def work():
        cat_index, _ = search_index()
        return evidence.run_scorecard(web_state().catalogue, observation=request.observation, k=request.k,
                                     permutations=request.permutations, resamples=request.resamples,
                                     cat_index=cat_index, include_demo=request.include_demo)

    def compute():
        return heavy("the scorecard", work, key=("scorecard", request, search_index()[1]))
    return web_state().index_cache.memo(("scorecard", request), compute)


# ---------------------------------------------------------------- CSV


def csv_response(rows: list[dict], columns: list[str], filename: str, *, caution: str | None = None) -> Response:
    """A CSV download; lists are joined with '|'. With `caution`, a first line '# caution: ...'."""
    buffer = io.StringIO()
    if caution:
        buffer.write(f"# caution: {caution}\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([spreadsheet_safe(row.get(c)) for c in columns])
    response = Response(buffer.getvalue(), mimetype="text/csv")
    response.headers["Content-Disposition"] = f'attachment; filename="{filename}"'
    return response

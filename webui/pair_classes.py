"""The pair classes page: every class with its pair count, and one class's test against the catalogue."""

from __future__ import annotations

from flask import Blueprint, render_template, request

from library.errors import OlibraError
from library.search import pair_classes
from webui import explore, search_index, web_state
from webui.errors import user_message
from webui.heavy import heavy

blueprint = Blueprint("pair_classes", __name__)


@blueprint.get("/pairs")
def index():
    error = test = None
    classes = []
    sources = []
    name = (request.args.get("class") or "").strip()
    observation = (request.args.get("observation") or "descriptors").strip()
    try:
        cat_index, revision = search_index()
        catalogue = web_state().catalogue
        sources = explore.observation_sources()
        classes = web_state().index_cache.memo(("pair classes", revision),
                                               lambda: pair_classes.list_classes(catalogue, cat_index))
        if name:
            if observation not in sources:
                raise OlibraError(f"observed similarity {observation[:40]!r} is not one of {', '.join(sources)}")
            tests = heavy("the pair class test", lambda: pair_classes.run_tests(
                catalogue, [name], observed=observation, cat_index=cat_index), key=("pairs", name, observation, revision))
            test = tests[0]
    except OlibraError as exc:
        error = user_message(exc)
    names = {} if not test else {i: cat_index.materials[i].name for pair in test.pairs for i in pair}
    return render_template("pairs/index.html", classes=classes, test=test, error=error, names=names,
                           sources=sources, observation=observation, chosen=name), 400 if error else 200

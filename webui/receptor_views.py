"""The receptor-model section of the material and compare pages: activation profiles of one or two
materials over a receptor panel chosen by the `panel` query argument, their chart and the panels
to choose from."""

from __future__ import annotations

from dataclasses import dataclass

from library.errors import OlibraError
from webui import charts, web_state
from webui.errors import user_message


@dataclass(frozen=True)
class ActivationView:
    panels: list  # every panel to choose from (ReceptorPanel)
    chosen: str  # the chosen panel's name
    profiles: list  # ActivationProfile per material, empty when there is nothing to show
    chart: object  # Markup or None
    message: str | None  # why there is nothing to show, or the problem with the chosen panel
    caution: str


def activation_view(material_ids: list[int], panel: str | None) -> ActivationView:
    from library.catalogue import receptor_panel_store
    from library.search.receptor_profiles import activation_profile
    from library.vibration import receptors, tunnelling

    state = web_state()
    with state.catalogue.reading() as session:
        panels = receptor_panel_store.panels(session)
    chosen = (panel or "").strip().lower() or receptors.DEFAULT_PANEL_NAME
    try:
        profiles = [activation_profile(state.catalogue, str(i), panel=chosen,
                                       vibration_engine=state.index_cache.vibration_engine) for i in material_ids]
    except OlibraError as exc:
        return ActivationView(panels, chosen, [], None, user_message(exc), tunnelling.CAUTION)
    return ActivationView(panels, chosen, profiles, charts.tunnelling_svg(profiles), None, tunnelling.CAUTION)

"""Virtual receptor panels: named lists of receptors, each a donor-acceptor gap (and optionally its
own reorganization energy), at which a material's tunnelling model (library.vibration.tunnelling)
is read. A material's activation profile over a panel is its Boltzmann-averaged inelastic
tunnelling rate (s^-1) at each receptor.

A receptor with the model's reorganization energy reads the stored tunnelling spectrum at its
gap. A receptor with its own ``lambda_ev`` changes the line shape (its centre ``hbar omega + lambda``
and its width ``sqrt(2 lambda k_B T)``), so its rate is computed afresh from the stored per-mode
Huang-Rhys factors and the vibration record's frequencies with the same formula.

The built-in panel is our own choice, not a published one: ten receptors whose gaps
``epsilon = hbar omega + lambda`` put their peak response at mode wavenumbers 500, 800, ..., 3200
cm^-1 (every 300 cm^-1 over the mid-infrared), with the default lambda of the tunnelling model.
Stored panels (library.catalogue.receptor_panel_store) are the user's own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from library.vibration import tunnelling

DEFAULT_PANEL_NAME = "mid-ir-10"
DEFAULT_PANEL_MODES_CM1 = tuple(float(w) for w in range(500, 3201, 300))
MAX_RECEPTORS = 200
MAX_LAMBDA_EV = 0.5  # a reorganization energy beyond the whole gap grid is not a receptor of this model


class PanelError(ValueError):
    """A panel definition that cannot be used; the message names the value and the allowed range."""


@dataclass(frozen=True)
class Receptor:
    """One receptor: its gap (eV) and, when it differs from the model's, its reorganization energy (eV)."""

    gap_ev: float
    lambda_ev: float | None = None


@dataclass(frozen=True)
class ReceptorPanel:
    """A named list of receptors."""

    name: str
    receptors: tuple[Receptor, ...]
    note: str = ""
    builtin: bool = False

    @property
    def gaps_ev(self) -> tuple[float, ...]:
        return tuple(r.gap_ev for r in self.receptors)


def default_panel() -> ReceptorPanel:
    lam = tunnelling.DEFAULTS["lambda_ev"]
    return ReceptorPanel(DEFAULT_PANEL_NAME,
                         tuple(Receptor(round(w * tunnelling.CM1_TO_EV + lam, 4)) for w in DEFAULT_PANEL_MODES_CM1),
                         note="built in: peaks every 300 cm-1 from 500 to 3200 cm-1", builtin=True)


def panel_gaps_ev(values, *, unit: str = "ev") -> tuple[float, ...]:
    """Gaps from user input in eV or cm^-1 (`unit` 'ev' or 'cm1'), checked against the grid 0-0.5 eV."""
    if unit not in ("ev", "cm1"):
        raise PanelError(f"gap unit must be 'ev' or 'cm1', got {unit!r}")
    try:
        gaps = np.asarray([float(v) for v in values], float)
    except (TypeError, ValueError):
        raise PanelError(f"gaps must be numbers, got {list(values)!r}") from None
    if unit == "cm1":
        gaps = gaps * tunnelling.CM1_TO_EV
    low, high = tunnelling.DEFAULTS["min_ev"], tunnelling.DEFAULTS["max_ev"]
    if gaps.size == 0 or not np.isfinite(gaps).all() or (gaps < low).any() or (gaps > high).any():
        raise PanelError(f"gaps must be one or more numbers within {low}-{high} eV "
                         f"({low / tunnelling.CM1_TO_EV:.0f}-{high / tunnelling.CM1_TO_EV:.0f} cm-1)")
    if gaps.size > MAX_RECEPTORS:
        raise PanelError(f"a panel holds at most {MAX_RECEPTORS} receptors, got {gaps.size}")
    return tuple(float(g) for g in gaps)


def make_panel(name: str, gaps, *, unit: str = "ev", lambdas_ev=None, note: str = "") -> ReceptorPanel:
    """A panel from user input: gaps (eV or cm^-1) and optionally one reorganization energy (eV) for
    every receptor, or a single one for all. PanelError names what is wrong."""
    gaps_ev = panel_gaps_ev(gaps, unit=unit)
    lambdas: list[float | None] = [None] * len(gaps_ev)
    if lambdas_ev:
        try:
            given = [float(v) for v in lambdas_ev]
        except (TypeError, ValueError):
            raise PanelError(f"reorganization energies must be numbers in eV, got {list(lambdas_ev)!r}") from None
        if len(given) not in (1, len(gaps_ev)):
            raise PanelError(f"give one reorganization energy for all receptors or one per gap "
                             f"({len(gaps_ev)}), got {len(given)}")
        if not all(np.isfinite(v) and 0.0 < v <= MAX_LAMBDA_EV for v in given):
            raise PanelError(f"reorganization energies must be within 0-{MAX_LAMBDA_EV} eV (above 0), got {given}")
        lambdas = given * len(gaps_ev) if len(given) == 1 else given
    return ReceptorPanel(name, tuple(Receptor(g, lam) for g, lam in zip(gaps_ev, lambdas)), note=note)


def profile(tunnelling_arrays: dict, panel: ReceptorPanel, *, settings: dict | None = None,
            vibration_arrays: dict | None = None) -> list[dict]:
    """Activation (inelastic rate, s^-1) at each receptor of `panel`, from a stored tunnelling record.

    `settings` are the tunnelling settings the record was computed with (its summary; the defaults
    when not given). A receptor with its own reorganization energy needs the vibration record's
    arrays (`vibration_arrays`, same conformers and mode order) to recompute its line shape.
    Each row: gap_ev, lambda_ev, mode_cm1 (the wavenumber the receptor responds to most,
    (gap - lambda) / hc), rate_s, relative (to the panel's largest rate).
    """
    model = tunnelling.recorded_settings(settings)
    grid = tunnelling.settings_grid_ev(model)
    stored = np.asarray(tunnelling_arrays["tunnelling_spectrum"], float)
    rates = []
    for receptor in panel.receptors:
        if receptor.lambda_ev is None or receptor.lambda_ev == model["lambda_ev"]:
            rates.append(float(np.interp(receptor.gap_ev, grid, stored)))
        else:
            rates.append(_rate_with_own_lambda(receptor, tunnelling_arrays, vibration_arrays, model))
    peak = max(rates, default=0.0) or 1.0
    rows = []
    for receptor, rate in zip(panel.receptors, rates):
        lam = model["lambda_ev"] if receptor.lambda_ev is None else receptor.lambda_ev
        rows.append({"gap_ev": receptor.gap_ev, "lambda_ev": lam,
                     "mode_cm1": round((receptor.gap_ev - lam) / tunnelling.CM1_TO_EV, 1),
                     "rate_s": rate, "relative": round(rate / peak, 4)})
    return rows


def _rate_with_own_lambda(receptor: Receptor, tunnelling_arrays: dict, vibration_arrays: dict | None,
                          model: dict) -> float:
    if vibration_arrays is None:
        raise PanelError("a receptor with its own reorganization energy needs the material's vibration record")
    frequencies = np.asarray(vibration_arrays["frequencies_cm1"], float)
    factors = np.asarray(tunnelling_arrays["huang_rhys"], float)
    counts = np.asarray(tunnelling_arrays["mode_counts"], float).astype(int)
    weights = np.asarray(tunnelling_arrays["weights"], float)
    if frequencies.shape != factors.shape or counts.sum() != factors.size:
        raise PanelError("the tunnelling and vibration records of this material do not match; recompute them")
    per_mode_weight = np.repeat(weights, counts)
    rate = tunnelling.inelastic_rate_s([receptor.gap_ev], frequencies, factors * per_mode_weight,
                                       lambda_ev=receptor.lambda_ev, temperature_k=model["temperature_k"],
                                       hopping_ev=model["hopping_ev"])
    return float(rate[0])

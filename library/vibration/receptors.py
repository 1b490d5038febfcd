"""Virtual receptor panels: named lists of donor-acceptor gaps at which a material's tunnelling
spectrum (library.vibration.tunnelling) is read. A material's activation profile over a panel is
its Boltzmann-averaged inelastic tunnelling rate (s^-1) at each gap.

The built-in panel is our own choice, not a published one: ten receptors whose gaps
``epsilon = hbar omega + lambda`` put their peak response at mode wavenumbers 500, 800, ..., 3200
cm^-1 (every 300 cm^-1 over the mid-infrared), with the default lambda of the tunnelling model.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from library.vibration import tunnelling

DEFAULT_PANEL_NAME = "mid-ir-10"
DEFAULT_PANEL_MODES_CM1 = tuple(float(w) for w in range(500, 3201, 300))


@dataclass(frozen=True)
class ReceptorPanel:
    """A named list of receptor gaps (eV)."""

    name: str
    gaps_ev: tuple[float, ...]


def default_panel() -> ReceptorPanel:
    lam = tunnelling.DEFAULTS["lambda_ev"]
    return ReceptorPanel(DEFAULT_PANEL_NAME,
                         tuple(round(w * tunnelling.CM1_TO_EV + lam, 4) for w in DEFAULT_PANEL_MODES_CM1))


def panel_gaps_ev(values, *, unit: str = "ev") -> tuple[float, ...]:
    """Gaps from user input in eV or cm^-1 (`unit` 'ev' or 'cm1'), checked against the grid 0-0.5 eV."""
    if unit not in ("ev", "cm1"):
        raise ValueError(f"gap unit must be 'ev' or 'cm1', got {unit!r}")
    try:
        gaps = np.asarray([float(v) for v in values], float)
    except (TypeError, ValueError):
        raise ValueError(f"gaps must be numbers, got {list(values)!r}") from None
    if unit == "cm1":
        gaps = gaps * tunnelling.CM1_TO_EV
    low, high = tunnelling.DEFAULTS["min_ev"], tunnelling.DEFAULTS["max_ev"]
    if gaps.size == 0 or not np.isfinite(gaps).all() or (gaps < low).any() or (gaps > high).any():
        raise ValueError(f"gaps must be one or more numbers within {low}-{high} eV "
                         f"({low / tunnelling.CM1_TO_EV:.0f}-{high / tunnelling.CM1_TO_EV:.0f} cm-1)")
    return tuple(float(g) for g in gaps)


def profile(rate_s, panel: ReceptorPanel, *, grid_ev=None) -> list[dict]:
    """Activation (inelastic rate, s^-1) at each gap of `panel` from a stored tunnelling spectrum."""
    grid = tunnelling.gap_grid_ev() if grid_ev is None else np.asarray(grid_ev, float)
    rates = np.interp(np.asarray(panel.gaps_ev), grid, np.asarray(rate_s, float))
    peak = float(rates.max()) or 1.0
    return [{"gap_ev": g, "mode_cm1": round((g - tunnelling.DEFAULTS["lambda_ev"]) / tunnelling.CM1_TO_EV, 1),
             "rate_s": float(r), "relative": round(float(r) / peak, 4)} for g, r in zip(panel.gaps_ev, rates)]

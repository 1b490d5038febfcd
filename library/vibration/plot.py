"""Draw a harmonic spectrum: population-weighted sticks plus the smoothed (EVA) curve."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from library.vibration.errors import VibrationInputError  # noqa: E402
from library.vibration.spectrum import VibrationSpectrum, _modes_and_amplitudes, _smoothed, grid_cm1  # noqa: E402


def _draw(axis, spec: VibrationSpectrum, sign: float, color: str, label: str, sigma_cm1: float,
          intensity_weighting: str, max_cm1: float) -> None:
    positions, amplitudes = _modes_and_amplitudes(spec, intensity_weighting)
    grid = grid_cm1(min_cm1=0.0, max_cm1=max_cm1, step_cm1=1.0)
    curve = _smoothed(positions, amplitudes, grid, sigma_cm1)
    peak = curve.max(initial=0.0) or 1.0
    stick_scale = 1.0 / (amplitudes.max(initial=0.0) or 1.0)
    axis.vlines(positions, 0.0, sign * amplitudes * stick_scale * 0.9, color=color, linewidth=0.6, alpha=0.6)
    axis.plot(grid, sign * curve / peak, color=color, linewidth=1.2, label=label)


def draw_spectrum(spectrum: VibrationSpectrum, out_path: str | Path, *, other: VibrationSpectrum | None = None,
                  sigma_cm1: float = 10.0, intensity_weighting: str = "auto", max_cm1: float = 4000.0,
                  title: str | None = None, labels: tuple[str, str] = ("material", "other")) -> Path:
    """Save a spectrum plot to `out_path` (.svg or .png); with `other`, draw it mirrored below.

    Sticks are the modes (height: conformer weight, times IR intensity when
    plotted IR-weighted); the line is the smoothed curve with Gaussians of
    width `sigma_cm1` (cm^-1), each scaled to its own maximum.
    """
    path = Path(out_path)
    if path.suffix.lower() not in (".svg", ".png"):
        raise VibrationInputError(f"plot file must end in .svg or .png, got {path.name!r}")
    figure, axis = plt.subplots(figsize=(9, 4 if other is None else 5.5))
    try:
        _draw(axis, spectrum, 1.0, "tab:blue", labels[0], sigma_cm1, intensity_weighting, max_cm1)
        if other is not None:
            _draw(axis, other, -1.0, "tab:red", labels[1], sigma_cm1, intensity_weighting, max_cm1)
            axis.axhline(0.0, color="black", linewidth=0.5)
            axis.legend(loc="upper left", frameon=False)
        axis.set_xlim(max_cm1, 0.0)  # spectroscopists' convention: wavenumber decreasing to the right
        axis.set_xlabel("wavenumber / cm$^{-1}$")
        axis.set_ylabel("relative intensity" if spectrum.has_ir and intensity_weighting != "none" else
                        "relative band density")
        axis.set_yticks([])
        axis.set_title(title or f"harmonic spectrum ({spectrum.engine})")
        figure.tight_layout()
        figure.savefig(path)
    finally:
        plt.close(figure)
    return path


__all__ = ["draw_spectrum"]

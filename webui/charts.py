"""Small hand-written SVG charts for the pages: spectra (single, mirrored, previews), the NPR shape
triangle and the scorecard. Numbers in, escaped SVG markup out; colors come from olibra.css classes
(the pages' Content-Security-Policy allows no inline styles), hover labels from SVG <title>.

Wavenumber axes run from 4000 cm^-1 on the left down to 0 on the right, as spectroscopists draw them.
"""

from __future__ import annotations

import numpy as np
from markupsafe import Markup, escape

MAX_CM1 = 4000.0
TICKS_CM1 = (4000, 3500, 3000, 2500, 2000, 1500, 1000, 500, 0)


def _points(xs, ys) -> str:
    return " ".join(f"{x:.1f},{y:.1f}" for x, y in zip(xs, ys))


def _reduce(grid: np.ndarray, curve: np.ndarray, points: int) -> tuple[np.ndarray, np.ndarray]:
    """At most `points` samples, keeping each window's largest value so that narrow bands survive."""
    grid, curve = np.asarray(grid, float), np.asarray(curve, float)
    if len(grid) <= points:
        return grid, curve
    window = int(np.ceil(len(grid) / points))
    usable = len(grid) // window * window
    g = grid[:usable].reshape(-1, window).mean(axis=1)
    c = curve[:usable].reshape(-1, window).max(axis=1)
    return g, c


def _x(cm1, left: float, width: float) -> float:
    return left + (MAX_CM1 - float(cm1)) / MAX_CM1 * width


def _axis(left, width, y, *, labels: bool = True) -> list[str]:
    parts = [f'<line class="axis" x1="{left}" y1="{y}" x2="{left + width}" y2="{y}"/>']
    for tick in TICKS_CM1:
        x = _x(tick, left, width)
        parts.append(f'<line class="axis" x1="{x:.1f}" y1="{y}" x2="{x:.1f}" y2="{y + 4}"/>')
        if labels:
            parts.append(f'<text class="tick" x="{x:.1f}" y="{y + 16}" text-anchor="middle">{tick}</text>')
    if labels:
        parts.append(f'<text class="axis-label" x="{left + width / 2}" y="{y + 32}" text-anchor="middle">'
                     'wavenumber / cm⁻¹</text>')
    return parts


def _band_title(band, extra: str = "") -> str:
    group = f" ({band.label})" if getattr(band, "label", None) else ""
    return escape(f"{band.position_cm1:.0f} cm⁻¹{group}, relative height {band.relative_height:.2f}{extra}")


def _band_text(band) -> str:
    """A band's printed label: its position, and its diagnostic group when it has one."""
    label = getattr(band, "label", None)
    return escape(f"{band.position_cm1:.0f}" + (f" {label}" if label else ""))


LABEL_CHAR_PX = 7.0  # about one character of the 12 px chart font


def _labelled_bands(bands, labelled: int, left: float, plot_w: float) -> list[bool]:
    """Which bands get a printed label: every band of a diagnostic group, then the tallest others up to
    `labelled` in all, leaving out any label that would overlap one already placed."""
    order = sorted(range(len(bands)), key=lambda i: (getattr(bands[i], "label", None) is None, i))
    placed: list[tuple[float, float]] = []
    printed = [False] * len(bands)
    for i in order:
        if sum(printed) >= max(labelled, sum(getattr(b, "label", None) is not None for b in bands)):
            break
        x = _x(bands[i].position_cm1, left, plot_w)
        half = len(str(_band_text(bands[i]))) * LABEL_CHAR_PX / 2 + 3
        if all(abs(x - other) > half + other_half for other, other_half in placed):
            placed.append((x, half))
            printed[i] = True
    return printed


def _value_axis_label(x: float, y: float, weighting: str) -> str:
    """The vertical axis's name, written upwards beside it."""
    return (f'<text class="axis-label" x="{x:.1f}" y="{y:.1f}" text-anchor="middle" '
            f'transform="rotate(-90 {x:.1f} {y:.1f})">relative {escape(weighting)}</text>')


def spectrum_svg(profile, *, width: int = 760, height: int = 230, labelled: int = 6) -> Markup:
    """One material's smoothed spectrum with its main bands marked; hovering a band names it."""
    left, right, top, bottom = 34, 20, 26, 44
    plot_w, plot_h = width - left - right, height - top - bottom
    weighting = getattr(profile, "weighting", "mode count")
    base = top + plot_h
    grid, curve = _reduce(profile.grid_cm1, profile.curve, 400)
    xs = [_x(g, left, plot_w) for g in grid]
    ys = [base - c * plot_h for c in curve]
    parts = [f'<svg class="chart spectrum" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
             f'role="img" aria-label="{escape(profile.name)}: harmonic spectrum ({escape(weighting)}) '
             f'with main bands">',
             f'<title>{escape(profile.name)}: harmonic spectrum ({escape(profile.engine)}), each mode weighted '
             f'by {escape(weighting)}</title>',
             f'<polyline class="curve curve-a" points="{_points(xs, ys)}"/>']
    parts += _axis(left, plot_w, base)
    parts.append(f'<line class="axis" x1="{left}" y1="{top}" x2="{left}" y2="{base}"/>')
    parts.append(_value_axis_label(left - 10, top + plot_h / 2, weighting))
    for band, printed in zip(profile.bands, _labelled_bands(profile.bands, labelled, left, plot_w)):
        x = _x(band.position_cm1, left, plot_w)
        y = base - band.relative_height * plot_h
        parts.append(f'<g class="band"><title>{_band_title(band)}</title>'
                     f'<line class="band-line" x1="{x:.1f}" y1="{base}" x2="{x:.1f}" y2="{y:.1f}"/>'
                     f'<circle class="band-dot" cx="{x:.1f}" cy="{y:.1f}" r="4"/>')
        if printed:
            parts.append(f'<text class="band-label" x="{x:.1f}" y="{y - 7:.1f}" text-anchor="middle">'
                         f'{_band_text(band)}</text>')
        parts.append("</g>")
    parts.append("</svg>")
    return Markup("".join(parts))


def mirrored_spectra_svg(profile_a, profile_b, bands, *, width: int = 900, height: int = 340) -> Markup:
    """A's spectrum above the axis, B's mirrored below; matched main bands joined and colored as
    matched, unmatched bands colored by the material that has them. `bands` is a BandMatch."""
    left, right, top, bottom = 34, 20, 22, 44
    plot_w = width - left - right
    half = (height - top - bottom) / 2
    middle = top + half
    weighting = getattr(profile_a, "weighting", "mode count")
    parts = [f'<svg class="chart spectrum mirrored" viewBox="0 0 {width} {height}" width="{width}" '
             f'height="{height}" role="img" aria-label="{escape(profile_a.name)} above, '
             f'{escape(profile_b.name)} mirrored below, with matched and unmatched bands">']
    for profile, sign, css in ((profile_a, -1.0, "curve-a"), (profile_b, 1.0, "curve-b")):
        grid, curve = _reduce(profile.grid_cm1, profile.curve, 450)
        xs = [_x(g, left, plot_w) for g in grid]
        ys = [middle + sign * c * (half - 4) for c in curve]
        parts.append(f'<polyline class="curve {css}" points="{_points(xs, ys)}"/>')
    parts.append(f'<text class="legend legend-a" x="{left + 4}" y="{top + 4}">▲ {escape(profile_a.name)}</text>')
    parts.append(f'<text class="legend legend-b" x="{left + 4}" y="{top + 2 * half - 4}">'
                 f'▼ {escape(profile_b.name)}</text>')
    for band_a, band_b in bands.pairs:
        xa, xb = _x(band_a.position_cm1, left, plot_w), _x(band_b.position_cm1, left, plot_w)
        ya = middle - band_a.relative_height * (half - 4)
        yb = middle + band_b.relative_height * (half - 4)
        title = escape(f"matched: {band_a.position_cm1:.0f} cm⁻¹ in {profile_a.name} and "
                       f"{band_b.position_cm1:.0f} cm⁻¹ in {profile_b.name} "
                       f"(within {bands.tolerance_cm1:g} cm⁻¹)")
        parts.append(f'<g class="band matched"><title>{title}</title>'
                     f'<line class="band-link" x1="{xa:.1f}" y1="{ya:.1f}" x2="{xb:.1f}" y2="{yb:.1f}"/>'
                     f'<circle class="band-dot" cx="{xa:.1f}" cy="{ya:.1f}" r="4"/>'
                     f'<circle class="band-dot" cx="{xb:.1f}" cy="{yb:.1f}" r="4"/></g>')
    for unmatched, sign, name in ((bands.unmatched_a, -1.0, profile_a.name), (bands.unmatched_b, 1.0, profile_b.name)):
        for band in unmatched:
            x = _x(band.position_cm1, left, plot_w)
            y = middle + sign * band.relative_height * (half - 4)
            parts.append(f'<g class="band unmatched"><title>{_band_title(band, f", only in {name}")}</title>'
                         f'<line class="band-line" x1="{x:.1f}" y1="{middle}" x2="{x:.1f}" y2="{y:.1f}"/>'
                         f'<rect class="band-dot" x="{x - 4:.1f}" y="{y - 4:.1f}" width="8" height="8"/></g>')
    parts += _axis(left, plot_w, top + 2 * half)
    parts.append(f'<line class="axis" x1="{left}" y1="{top}" x2="{left}" y2="{top + 2 * half}"/>')
    parts.append(_value_axis_label(left - 10, middle, weighting))
    parts.append(f'<line class="axis zero" x1="{left}" y1="{middle}" x2="{left + plot_w}" y2="{middle}"/>')
    parts.append("</svg>")
    return Markup("".join(parts))


PREVIEW_SIZE = (180, 44)


TUNNELLING_DECADES = 8  # the rates span many orders of magnitude (soft modes couple as 1/omega^3)


def tunnelling_svg(profiles, *, width: int = 760, height: int = 240) -> Markup:
    """One or two materials' tunnelling spectra (inelastic rate against receptor gap) on a log scale
    of TUNNELLING_DECADES decades below the largest rate, with the panel's receptors marked; hovering
    a receptor gives its figures. `profiles` are ActivationProfile over the same panel."""
    left, right, top, bottom = 44, 20, 26, 44
    plot_w, plot_h = width - left - right, height - top - bottom
    base = top + plot_h
    grid = np.asarray(profiles[0].grid_ev, float)
    low, high = float(grid[0]), float(grid[-1])
    ceiling = float(np.log10(max(float(np.max(p.rate_s, initial=0.0)) for p in profiles) or 1.0))

    def x_of(gap_ev: float) -> float:
        return left + (float(gap_ev) - low) / ((high - low) or 1.0) * plot_w

    def y_of(rate_s):
        decades = np.log10(np.maximum(np.asarray(rate_s, float), 1e-300)) - ceiling
        return base - np.clip(1.0 + decades / TUNNELLING_DECADES, 0.0, 1.0) * plot_h

    names = " and ".join(p.name for p in profiles)
    parts = [f'<svg class="chart tunnelling" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
             f'role="img" aria-label="{escape(names)}: tunnelling spectrum with the receptors of panel '
             f'{escape(profiles[0].panel.name)}">',
             f'<title>{escape(names)}: inelastic tunnelling rate against receptor gap, log scale; panel '
             f'{escape(profiles[0].panel.name)}</title>']
    superscripts = str.maketrans("0123456789", "⁰¹²³⁴⁵⁶⁷⁸⁹")
    for decade in range(TUNNELLING_DECADES + 1):
        y = top + decade / TUNNELLING_DECADES * plot_h
        label = "1" if decade == 0 else f"10⁻{str(decade).translate(superscripts)}"
        parts.append(f'<line class="gridline" x1="{left}" y1="{y:.1f}" x2="{left + plot_w}" y2="{y:.1f}"/>'
                     f'<text class="tick" x="{left - 4}" y="{y + 4:.1f}" text-anchor="end">{label}</text>')
    for profile, css in zip(profiles, ("curve-a", "curve-b")):
        g, rate = _reduce(profile.grid_ev, profile.rate_s, 400)
        parts.append(f'<polyline class="curve {css}" points="{_points([x_of(v) for v in g], y_of(rate))}"/>')
    parts.append(f'<line class="axis" x1="{left}" y1="{base}" x2="{left + plot_w}" y2="{base}"/>')
    parts.append(f'<line class="axis" x1="{left}" y1="{top}" x2="{left}" y2="{base}"/>')
    for tick in np.arange(0.0, high + 1e-9, 0.1):
        x = x_of(tick)
        parts.append(f'<line class="axis" x1="{x:.1f}" y1="{base}" x2="{x:.1f}" y2="{base + 4}"/>'
                     f'<text class="tick" x="{x:.1f}" y="{base + 16}" text-anchor="middle">{tick:.1f}</text>')
    parts.append(f'<text class="axis-label" x="{left + plot_w / 2}" y="{base + 32}" text-anchor="middle">'
                 'receptor gap / eV</text>')
    parts.append(f'<text class="axis-label" x="12" y="{top + plot_h / 2}" text-anchor="middle" '
                 f'transform="rotate(-90 12 {top + plot_h / 2})">rate / largest rate (log)</text>')
    for i, row in enumerate(profiles[0].rows):
        x = x_of(row["gap_ev"])
        figures = "; ".join(f"{p.name} {p.rows[i]['rate_s']:.3g} s⁻¹" for p in profiles)
        title = escape(f"receptor at {row['gap_ev']:.3f} eV (lambda {row['lambda_ev']:.3f} eV, responds to modes "
                       f"near {row['mode_cm1']:.0f} cm⁻¹): {figures}")
        parts.append(f'<g class="band receptor"><title>{title}</title>'
                     f'<line class="band-line" x1="{x:.1f}" y1="{top}" x2="{x:.1f}" y2="{base}"/>')
        for p, css in zip(profiles, ("dot-a", "dot-b")):
            y = float(y_of(p.rows[i]["rate_s"]))
            parts.append(f'<circle class="band-dot {css}" cx="{x:.1f}" cy="{y:.1f}" r="4"/>')
        parts.append("</g>")
    parts.append("</svg>")
    return Markup("".join(parts))


def preview_points(grid, curve) -> str:
    """Polyline points of a spectrum preview (for `preview_svg`; cheap to keep per material)."""
    width, height = PREVIEW_SIZE
    grid, values = _reduce(grid, curve, 120)
    xs = 2 + (MAX_CM1 - grid) / MAX_CM1 * (width - 4)
    ys = height - 2 - values * (height - 6)
    return _points(xs, ys)


def preview_svg(points: str | None, reference: str | None = None, *, label: str = "") -> Markup:
    """A small spectrum preview: a candidate's curve (points from `preview_points`) over the query's in gray."""
    if points is None:
        return Markup('<span class="empty">no spectrum</span>')
    width, height = PREVIEW_SIZE
    parts = [f'<svg class="chart preview" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
             f'role="img" aria-label="{escape(label)}"><title>{escape(label)}</title>']
    if reference is not None:
        parts.append(f'<polyline class="curve curve-query" points="{reference}"/>')
    parts.append(f'<polyline class="curve curve-a" points="{points}"/></svg>')
    return Markup("".join(parts))


def npr_triangle_svg(npr1: float, npr2: float, *, name: str = "", size: int = 240) -> Markup:
    """The normalized PMI ratio triangle (rod, disc, sphere corners) with the material's position.

    NPR1 runs 0-1 on the horizontal axis and NPR2 0.5-1 on the vertical axis, each with its
    ticks and label; the corner names sit outside the triangle, clear of the ticks."""
    left, right, top, bottom = 62, 18, 26, 46
    width, height = size + 16, size
    span_x, span_y = width - left - right, height - top - bottom

    def point(x, y):  # NPR1 on the horizontal axis 0-1, NPR2 on the vertical axis 0.5-1
        return left + x * span_x, top + (1.0 - y) / 0.5 * span_y

    rod, disc, sphere = point(0, 1), point(0.5, 0.5), point(1, 1)
    px, py = point(min(max(npr1, 0.0), 1.0), min(max(npr2, 0.5), 1.0))
    title = escape(f"{name}: NPR1 {npr1:.3f}, NPR2 {npr2:.3f}")
    axis_y, axis_x = top + span_y + 8, left - 8
    parts = [f'<svg class="chart npr" viewBox="0 0 {width} {height}" width="{width}" height="{height}" role="img" '
             f'aria-label="{title}"><polygon class="triangle" points="{_points(*zip(rod, disc, sphere))}"/>',
             f'<line class="axis" x1="{left}" y1="{axis_y}" x2="{left + span_x}" y2="{axis_y}"/>',
             f'<line class="axis" x1="{axis_x}" y1="{top}" x2="{axis_x}" y2="{top + span_y}"/>']
    for value in (0.0, 0.5, 1.0):
        x, _ = point(value, 0.5)
        parts.append(f'<line class="axis" x1="{x:.1f}" y1="{axis_y}" x2="{x:.1f}" y2="{axis_y + 4}"/>'
                     f'<text class="tick" x="{x:.1f}" y="{axis_y + 15}" text-anchor="middle">{value:g}</text>')
    for value in (0.5, 0.75, 1.0):
        _, y = point(0.0, value)
        parts.append(f'<line class="axis" x1="{axis_x - 4}" y1="{y:.1f}" x2="{axis_x}" y2="{y:.1f}"/>'
                     f'<text class="tick" x="{axis_x - 6}" y="{y + 4:.1f}" text-anchor="end">{value:g}</text>')
    parts += [
        f'<text class="tick corner" x="{rod[0]}" y="{rod[1] - 8}" text-anchor="start">rod</text>',
        f'<text class="tick corner" x="{sphere[0]}" y="{sphere[1] - 8}" text-anchor="end">sphere</text>',
        f'<text class="tick corner" x="{disc[0] + 10}" y="{disc[1] - 2}" text-anchor="start">disc</text>',
        f'<text class="axis-label" x="{left + span_x / 2}" y="{height - 6}" text-anchor="middle">NPR1</text>',
        f'<text class="axis-label" x="12" y="{top + span_y / 2}" text-anchor="middle" '
        f'transform="rotate(-90 12 {top + span_y / 2})">NPR2</text>',
        f'<g class="band"><title>{title}</title><circle class="npr-point" cx="{px:.1f}" cy="{py:.1f}" r="6"/></g>',
        "</svg>"]
    return Markup("".join(parts))


def scorecard_svg(scores, *, width: int = 760) -> Markup:
    """Per metric: Spearman correlation with its bootstrap interval (left panel, -1 to 1) and
    precision at k (right panel, 0 to 1); hovering a mark gives the figures and the Mantel p."""
    row_h, top, label_w, gap = 34, 30, 90, 40
    panel_w = (width - label_w - gap - 20) / 2
    height = top + row_h * len(scores) + 30
    left_a, left_b = label_w, label_w + panel_w + gap

    def xa(v):
        return left_a + (max(-1.0, min(1.0, v)) + 1.0) / 2.0 * panel_w

    def xb(v):
        return left_b + max(0.0, min(1.0, v)) * panel_w

    parts = [f'<svg class="chart scorecard" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
             'role="img" aria-label="Spearman correlation with bootstrap interval and precision at k per metric">',
             f'<text class="axis-label" x="{left_a + panel_w / 2}" y="14" text-anchor="middle">'
             'Spearman correlation with observed similarity</text>',
             f'<text class="axis-label" x="{left_b + panel_w / 2}" y="14" text-anchor="middle">'
             f'precision at {scores[0].k if scores else 5}</text>']
    bottom = top + row_h * len(scores)
    for v in (-1.0, -0.5, 0.0, 0.5, 1.0):
        parts.append(f'<line class="gridline{" zero" if v == 0 else ""}" x1="{xa(v):.1f}" y1="{top - 6}" '
                     f'x2="{xa(v):.1f}" y2="{bottom}"/>'
                     f'<text class="tick" x="{xa(v):.1f}" y="{bottom + 16}" text-anchor="middle">{v:g}</text>')
    for v in (0.0, 0.5, 1.0):
        parts.append(f'<line class="gridline" x1="{xb(v):.1f}" y1="{top - 6}" x2="{xb(v):.1f}" y2="{bottom}"/>'
                     f'<text class="tick" x="{xb(v):.1f}" y="{bottom + 16}" text-anchor="middle">{v:g}</text>')
    for i, s in enumerate(scores):
        y = top + row_h * i + row_h / 2
        significant = " significant" if s.mantel_p <= 0.05 else ""
        title = escape(f"{s.metric}: Spearman {s.spearman:.3f} ({int(s.confidence * 100)} % interval "
                       f"{s.ci_low:.3f} to {s.ci_high:.3f}), Mantel p {s.mantel_p:.4f} "
                       f"({s.permutations} permutations), {s.pairs} pairs")
        parts.append(f'<text class="metric-label" x="{label_w - 10}" y="{y + 4:.1f}" text-anchor="end">'
                     f'{escape(s.metric)}</text>')
        parts.append(f'<g class="band{significant}"><title>{title}</title>'
                     f'<line class="whisker" x1="{xa(s.ci_low):.1f}" y1="{y:.1f}" x2="{xa(s.ci_high):.1f}" y2="{y:.1f}"/>'
                     f'<circle class="estimate" cx="{xa(s.spearman):.1f}" cy="{y:.1f}" r="5"/></g>')
        if s.precision_at_k is not None and np.isfinite(s.precision_at_k):
            bar_title = escape(f"{s.metric}: precision at {s.k} {s.precision_at_k:.3f}")
            parts.append(f'<g class="band"><title>{bar_title}</title><rect class="bar" x="{left_b}" '
                         f'y="{y - 8:.1f}" width="{xb(s.precision_at_k) - left_b:.1f}" height="16"/></g>')
    parts.append("</svg>")
    return Markup("".join(parts))

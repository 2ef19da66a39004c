"""The evidence plot of one snapshot point: spectra with band regions and defect-frequency markers.

Three panels, top to bottom: the velocity spectrum (mm/s RMS) up to the overall band's upper edge or
12 orders, with shaft and blade-pass markers; the acceleration spectrum (m/s^2 RMS, log scale) with
the acceleration bands and the envelope demodulation band; the envelope spectrum with the bearing
defect frequencies and their harmonics, of the point's own bearing (every bearing of the machine with
``all_bearings``, or when the point names none). Band regions are shaded with their names; marker
families have their own colour, harmonics fade. A header gives machine, point, time, reason, speed and
states; the legend has a row of its own under it, so neither runs into the other.

matplotlib is an optional extra (``pip install 'rotorwatch[plot]'``); it is imported only here, when a
plot is asked for, with the non-interactive Agg backend.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from ..errors import RotorwatchError
from . import StorageError

# Our own palette: warm paper, ink blue, ochre bands; one hue per marker family.
PAPER = "#f4f1ea"
PANEL = "#fbfaf6"
INK = "#22577a"
BAND = "#e3b448"
BAND_TEXT = "#7a5c12"
DEMOD = "#9fb8ad"
FAMILY_COLOURS = {
    "shaft": "#5e3c99", "blade": "#1b9e77",
    "bpfo": "#c0392b", "bpfi": "#e67e22", "bsf": "#2e7d32", "ftf": "#8e6c8a",
}
FAMILY_LABELS = {"shaft": "shaft orders", "blade": "blade pass", "bpfo": "BPFO", "bpfi": "BPFI",
                 "bsf": "BSF", "ftf": "FTF"}


def _pyplot():
    try:
        import matplotlib
    except ImportError:
        raise RotorwatchError("plotting needs matplotlib: pip install 'rotorwatch[plot]'") from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _draw_bands(ax: Any, bands: list[dict], quantity: str, x_max: float) -> None:
    """Shade each band part; the broadband ``overall`` band gets edge ticks only (it spans the panel)."""
    for band in bands:
        if band.get("quantity") != quantity:
            continue
        if band.get("name") == "overall":
            lo, hi = band["parts_hz"][0]
            ax.axvspan(lo, min(hi, x_max), ymin=0, ymax=0.025, color=BAND_TEXT, alpha=0.35, lw=0, zorder=1)
            ax.text(lo, 0.035, f" overall {lo:g}-{hi:g} Hz", transform=ax.get_xaxis_transform(), fontsize=7,
                    color=BAND_TEXT, va="bottom", ha="left", clip_on=True)
            continue
        for i, (lo, hi) in enumerate(band.get("parts_hz", [])):
            if lo >= x_max:
                continue
            ax.axvspan(lo, min(hi, x_max), color=BAND, alpha=0.25, lw=0, zorder=0)
            if i == 0:
                ax.text(hi, 0.04, f" {band['name']}", transform=ax.get_xaxis_transform(), fontsize=7,
                        color=BAND_TEXT, va="bottom", ha="left", rotation=90, clip_on=True)


def _draw_markers(ax: Any, markers: list[dict], families: tuple[str, ...], x_max: float) -> set[str]:
    shown = set()
    for m in markers:
        fam = m.get("family")
        f = m.get("frequency_hz")
        if fam not in families or f is None or not 0 < f < x_max:
            continue
        k = int(m.get("harmonic", 1))
        style = "--" if fam in ("shaft", "blade") else (0, (4, 2, 1, 2))
        ax.axvline(f, color=FAMILY_COLOURS[fam], ls=style, lw=1.0, alpha=max(0.35, 1.0 - 0.25 * (k - 1)), zorder=2)
        if k == 1:
            ax.text(f, 0.86, f" {m['name']}", transform=ax.get_xaxis_transform(), fontsize=7,
                    color=FAMILY_COLOURS[fam], rotation=90, va="top", ha="left", clip_on=True)
        shown.add(fam)
    return shown


def _spectrum_panel(ax: Any, spec: Any, x_max: float, title: str, ylabel: str, log_y: bool) -> None:
    f, a = np.asarray(spec.freqs_hz), np.asarray(spec.amplitude)
    keep = f <= x_max
    ax.set_facecolor(PANEL)
    ax.plot(f[keep], a[keep], color=INK, lw=0.9, zorder=3)
    ax.fill_between(f[keep], a[keep], color=INK, alpha=0.12, lw=0, zorder=1)
    ax.set_xlim(0, x_max)
    if log_y:
        positive = a[keep][a[keep] > 0]
        if positive.size:
            ax.set_yscale("log")
            ax.set_ylim(positive.min() * 0.8, positive.max() * 3.0)
    else:
        ax.set_ylim(0, (a[keep].max() if keep.any() else 1.0) * 1.25 or 1.0)
    ax.set_title(title, loc="left", fontsize=9, color="#333333")
    ax.set_ylabel(ylabel, fontsize=8)
    ax.tick_params(labelsize=7)
    ax.grid(True, color="#d9d4c7", lw=0.5, ls=":")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def plot_snapshot(store: Any, snap_id: str, out_path: str | Path, point_id: str | None = None,
                  all_bearings: bool = False) -> Path:
    """Draw ``point_id`` (default: the first point with spectra) of snapshot ``snap_id`` to a PNG.

    Bearing-defect markers are the point's own bearing's, unless ``all_bearings`` (or the point names
    no bearing)."""
    plt = _pyplot()
    fig = draw_snapshot(store, snap_id, point_id, all_bearings)
    out = Path(out_path)
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(out, dpi=110, facecolor=PAPER)
    except OSError as e:
        raise StorageError(f"{out}: cannot write the plot: {e.strerror or e}") from e
    finally:
        plt.close(fig)
    return out


def _velocity_panel(ax: Any, spec: Any, bands: list, markers: list, entry: dict, shaft_hz: float) -> set[str]:
    """Velocity spectrum up to the overall band's top (or a dozen orders, past blade pass), with its bands."""
    f_top = float(np.asarray(spec.freqs_hz).max())
    overall_hi = next((b["parts_hz"][0][1] for b in bands if b.get("name") == "overall"), f_top)
    blade_hz = max((m["frequency_hz"] for m in markers if m.get("family") == "blade"), default=0.0)
    wanted = max(12 * shaft_hz, 1.15 * blade_hz)
    x_max = min(f_top, overall_hi, wanted) if wanted > 0 else min(f_top, overall_hi)
    _spectrum_panel(ax, spec, x_max, "velocity spectrum", f"{spec.unit} RMS", log_y=False)
    _draw_bands(ax, bands, "velocity", x_max)
    return _draw_markers(ax, markers, ("shaft", "blade"), x_max)


def _acceleration_panel(ax: Any, spec: Any, bands: list, markers: list, entry: dict, shaft_hz: float) -> set[str]:
    """Acceleration spectrum over its whole span, with the demodulation band hatched."""
    x_max = float(np.asarray(spec.freqs_hz).max())
    _spectrum_panel(ax, spec, x_max, "acceleration spectrum", f"{spec.unit} RMS", log_y=True)
    demod = entry.get("envelope_band_hz")
    if demod:
        ax.axvspan(demod[0], min(demod[1], x_max), facecolor="none", edgecolor=DEMOD, hatch="////",
                   lw=0.0, zorder=0)
        ax.text(min(demod[1], x_max), 0.985, f"demodulation band {demod[0]:g}-{demod[1]:g} Hz ",
                transform=ax.get_xaxis_transform(), fontsize=7, color="#4f6f64", va="top", ha="right",
                clip_on=True)
    _draw_bands(ax, bands, "acceleration", x_max)
    return _draw_markers(ax, markers, ("blade",), x_max)


def _envelope_panel(ax: Any, spec: Any, bands: list, markers: list, entry: dict, shaft_hz: float) -> set[str]:
    """Envelope spectrum up to a little past the highest defect marker, with the envelope bands."""
    f_top = float(np.asarray(spec.freqs_hz).max())
    defect_top = max((m["frequency_hz"] for m in markers if m.get("family") in ("bpfo", "bpfi", "bsf", "ftf")),
                     default=0.0)
    x_max = min(f_top, defect_top * 1.1) if defect_top else f_top
    _spectrum_panel(ax, spec, x_max, "envelope spectrum", f"{spec.unit} RMS", log_y=False)
    _draw_bands(ax, bands, "envelope", x_max)
    return _draw_markers(ax, markers, ("shaft", "bpfo", "bpfi", "bsf", "ftf"), x_max)


#: The panels of a snapshot plot, top to bottom, by the spectrum they draw.
_PANELS = {"velocity": _velocity_panel, "acceleration": _acceleration_panel, "envelope": _envelope_panel}


def draw_snapshot(store: Any, snap_id: str, point_id: str | None = None, all_bearings: bool = False) -> Any:
    """The matplotlib figure :func:`plot_snapshot` saves (close it with ``pyplot.close``)."""
    doc = store.load(snap_id)
    points = doc.get("points", {})
    if point_id is None:
        point_id = next((p for p, e in points.items() if e.get("spectra_file")), None)
        if point_id is None:
            raise StorageError(f"snapshot {snap_id!r}: no point has spectra to plot")
    spectra = store.read_spectra(snap_id, point_id)
    if not spectra:
        raise StorageError(f"snapshot {snap_id!r}: point {point_id!r} has no spectra to plot")
    plt = _pyplot()
    entry = points[point_id]
    bands = entry.get("bands", [])
    markers = doc.get("markers", [])
    own = entry.get("bearing")
    if own is not None and not all_bearings:
        markers = [m for m in markers if m.get("bearing") in (None, own)]
    shaft_hz = (doc.get("speed") or {}).get("shaft_hz") or 0.0
    panels = [q for q in _PANELS if q in spectra]
    fig, axes = plt.subplots(len(panels), 1, figsize=(11, 2.9 * len(panels) + 0.8), facecolor=PAPER, squeeze=False)
    legend_families: set[str] = set()
    for ax, q in zip(axes[:, 0], panels):
        legend_families |= _PANELS[q](ax, spectra[q], bands, markers, entry, shaft_hz)
        ax.set_xlabel("frequency (Hz)", fontsize=8)
    speed = doc.get("speed") or {}
    rpm = speed.get("rpm")
    import textwrap

    head = (f"{doc.get('machine')} / {point_id}   {doc.get('time_utc')}   {doc.get('reason')}"
            + (f": {doc['detail']}" if doc.get("detail") else ""))
    head_lines = textwrap.wrap(head, 120, subsequent_indent="    ")[:3]
    overall = entry.get("overall_velocity_mm_s")
    sub = "   ".join(s for s in (
        f"speed {rpm:.0f} rpm ({speed.get('source')})" if rpm else "speed unknown",
        f"machine {doc.get('machine_state')}", f"point {entry.get('state')}",
        f"overall {overall:.2f} mm/s zone {entry.get('iso_zone')}" if overall is not None else "",
    ) if s)
    # header rows from the top, in inches: title line(s), the states line, then the legend's own row
    inch = 1.0 / fig.get_figheight()
    y = 1.0 - 0.08 * inch
    for line in head_lines:
        fig.text(0.01, y, line, fontsize=10, weight="bold", va="top", color="#222222")
        y -= 0.22 * inch
    fig.text(0.01, y - 0.04 * inch, sub, fontsize=8, va="top", color="#444444")
    y -= 0.26 * inch
    if legend_families:
        from matplotlib.lines import Line2D

        handles = [Line2D([], [], color=FAMILY_COLOURS[f], ls="--", lw=1.2, label=FAMILY_LABELS[f])
                   for f in FAMILY_COLOURS if f in legend_families]
        if own is not None and not all_bearings:
            handles.append(Line2D([], [], color="none", label=f"(bearing markers: {own})"))
        fig.legend(handles=handles, loc="upper left", ncol=len(handles), fontsize=7, frameon=False,
                   bbox_to_anchor=(0.005, y), borderaxespad=0.0)
        y -= 0.24 * inch
    fig.tight_layout(rect=(0, 0, 1, y - 0.05 * inch))
    return fig

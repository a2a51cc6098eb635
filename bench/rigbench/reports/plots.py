"""PNG figures of a report, drawn with matplotlib (the optional ``plots`` extra) on the Agg
backend. Each function takes data already read (rigbench.reports.report gathers it), writes one PNG
and returns a :class:`Plot` naming the file, the recording it came from and the series it
drew (label -> (x, y) arrays), so tests can check a figure shows what the recording holds.

Figures: the signals of a recording with the board's mode changes and trips marked; the
relay cycles with the switching instants and the cycles used; the identified plant's
frequency response with the measured points; the loop's frequency response for the current
gains and the proposals with their predicted margins marked; the sweep metrics per sweep
step as bars with their spread (min to max).

matplotlib is imported only inside the functions (``PlotsUnavailable`` when it is missing).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["Plot", "PlotsUnavailable", "INSTALL_HINT", "need_matplotlib", "unit_text", "plot_signals", "plot_relay", "plot_model",
           "plot_margins", "plot_sweeps"]

_STYLE = {
    "figure.dpi": 110, "savefig.dpi": 110, "font.size": 9.5, "axes.titlesize": 10.5,
    "axes.labelsize": 9.5, "axes.grid": True, "grid.alpha": 0.35, "grid.linewidth": 0.6,
    "axes.spines.top": False, "axes.spines.right": False, "legend.fontsize": 8.5,
    "legend.framealpha": 0.85, "lines.linewidth": 1.1,
    "axes.prop_cycle": None,  # set in _mpl()
}
_COLOURS = ["#1f5fa8", "#c2571a", "#2e8b57", "#8e44ad", "#b8860b", "#444444"]


# works for a pip install (venv or editable: pip adds the extra's packages) and for pipx
INSTALL_HINT = ("matplotlib is not installed, so no PNG plots: pip install 'rigbench[plots]' "
                "(or, for a pipx install: pipx inject rigbench matplotlib)")


class PlotsUnavailable(RuntimeError):
    """matplotlib is not installed."""


@dataclass
class Plot:
    path: Path
    caption: str
    kind: str                       # signals | relay | model | margins | sweep
    source: str | None = None       # recording file name the data came from
    series: dict = field(default_factory=dict)


def _mpl():
    try:
        import matplotlib
    except ImportError:
        raise PlotsUnavailable(INSTALL_HINT) from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    from cycler import cycler

    style = dict(_STYLE, **{"axes.prop_cycle": cycler(color=_COLOURS)})
    return plt, style


def unit_text(unit: str, *, lead: str = " ") -> str:
    """A unit after a number: nothing for the dimensionless ``1``."""
    return "" if unit in ("", "1") else f"{lead}{unit}"


def need_matplotlib() -> None:
    """Raise PlotsUnavailable now when matplotlib is missing."""
    _mpl()


def _save(fig, plt, path: Path) -> None:
    fig.savefig(path)  # constrained layout already keeps every label inside
    plt.close(fig)


def _marks(ax, marks, *, label_top: bool) -> None:
    """Vertical lines at (t, label, colour) marks; labels along the top of the axes."""
    for t, label, colour in marks:
        ax.axvline(t, color=colour, linewidth=0.8, linestyle="--", alpha=0.8)
        if label_top:
            ax.annotate(label, (t, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(2, 2), textcoords="offset points", fontsize=7.5,
                        color=colour, rotation=30, ha="left", va="bottom")


def plot_signals(path: Path, *, title: str, source: str, t_s, columns: list, marks=()) -> Plot:
    """Stacked panels, one per (name, unit, values) in ``columns`` against ``t_s`` (s)."""
    plt, style = _mpl()
    n = len(columns)
    with plt.rc_context(style):
        fig, axes = plt.subplots(n, 1, figsize=(9.5, 1.55 + 1.45 * n), sharex=True,
                                 squeeze=False, layout="constrained")
        series = {}
        for k, (ax, (name, unit, y)) in enumerate(zip(axes[:, 0], columns)):
            ax.plot(t_s, y, color=_COLOURS[k % len(_COLOURS)], label=name)
            ax.set_ylabel(f"{name} [{unit}]")
            _marks(ax, marks, label_top=k == 0)
            series[name] = (np.asarray(t_s), np.asarray(y))
        axes[-1, 0].set_xlabel("time since the recording started [s]")
        fig.suptitle(title)
        fig.align_ylabels(axes[:, 0])
        _save(fig, plt, path)
    return Plot(path, title, "signals", source, series)


def plot_relay(path: Path, *, title: str, source: str, t_s, measure, output, relay,
               switches_s, used, text: str, setpoint=None) -> Plot:
    """Measure (and set-point) above, output and relay state below, switching instants
    (rising switches) as dotted lines, the cycles used for the estimates shaded.
    ``measure``/``output``/``setpoint``/``relay`` are (name, unit, values)."""
    plt, style = _mpl()
    with plt.rc_context(style):
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(9.5, 5.8), sharex=True,
                                     layout="constrained")
        series = {measure[0]: (np.asarray(t_s), np.asarray(measure[2])),
                  output[0]: (np.asarray(t_s), np.asarray(output[2]))}
        a1.plot(t_s, measure[2], color=_COLOURS[0], label=measure[0])
        if setpoint is not None:
            a1.plot(t_s, setpoint[2], color=_COLOURS[2], linewidth=0.9, label=setpoint[0])
        a1.set_ylabel(f"{measure[0]} [{measure[1]}]")
        a2.plot(t_s, output[2], color=_COLOURS[1], label=output[0])
        a2.set_ylabel(f"{output[0]} [{output[1]}]")
        if relay is not None:
            ax_r = a2.twinx()
            ax_r.step(t_s, relay[2], where="post", color="#777777", linewidth=0.7,
                      label=f"{relay[0]} state")
            ax_r.set_ylim(-3, 3)
            ax_r.set_yticks([-1, 1])
            ax_r.set_ylabel("relay state", color="#777777")
            ax_r.grid(False)
            a2.plot([], [], color="#777777", linewidth=0.7, label="relay state (right)")
        for ax in (a1, a2):
            for k, ts in enumerate(switches_s):
                ax.axvline(ts, color="#555555", linestyle=":", linewidth=0.7,
                           label="rising switch" if (k == 0 and ax is a1) else None)
            if used is not None:
                ax.axvspan(used[0], used[1], color=_COLOURS[2], alpha=0.10,
                           label="cycles used" if ax is a1 else None)
        a1.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=4, frameon=False)
        a2.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), frameon=False)
        a2.set_xlabel("time since the recording started [s]")
        fig.suptitle(title)
        fig.supxlabel(text, fontsize=9,
                      bbox={"boxstyle": "round", "fc": "white", "ec": "#999999"})
        fig.align_ylabels((a1, a2))
        _save(fig, plt, path)
    return Plot(path, title, "relay", source, series)


def _phase_deg(h: np.ndarray) -> np.ndarray:
    return np.degrees(np.unwrap(np.angle(h)))


def plot_model(path: Path, *, title: str, source: str | None, omega, response, points,
               units: str) -> Plot:
    """Bode magnitude and phase of the identified plant; measured points as markers.
    ``points``: label -> list of (omega, complex value)."""
    plt, style = _mpl()
    omega = np.asarray(omega)
    ph = _phase_deg(response)
    # put the curve's phase on the branch of the first measured point
    first = next((v for pts in points.values() for v in pts), None)
    if first is not None:
        w0, g0 = first
        ph0 = np.interp(math.log(w0), np.log(omega), ph)
        want = math.degrees(np.angle(g0))
        ph += 360.0 * round((want - ph0) / 360.0)
    with plt.rc_context(style):
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(8.5, 6.0), sharex=True,
                                     layout="constrained")
        a1.semilogx(omega, 20 * np.log10(np.abs(response)), color=_COLOURS[0],
                    label="identified model")
        a2.semilogx(omega, ph, color=_COLOURS[0], label="identified model")
        series = {"model": (omega, np.asarray(response))}
        markers = iter(("o", "s", "^", "D"))
        for k, (label, pts) in enumerate(points.items()):
            if not pts:
                continue
            w = np.array([p[0] for p in pts])
            g = np.array([p[1] for p in pts])
            m = next(markers, "o")
            p_deg = np.degrees(np.angle(g))
            p_deg = p_deg + 360.0 * np.round((np.interp(np.log(w), np.log(omega), ph)
                                              - p_deg) / 360.0)
            a1.semilogx(w, 20 * np.log10(np.abs(g)), m, color=_COLOURS[1 + k],
                        markersize=6, fillstyle="none" if k else "full", label=label)
            a2.semilogx(w, p_deg, m, color=_COLOURS[1 + k], markersize=6,
                        fillstyle="none" if k else "full", label=label)
            series[label] = (w, g)
        a1.set_ylabel("|G| [dB]" if units in ("", "1") else f"|G| [dB re 1 {units}]")
        a2.set_ylabel("phase [deg]")
        a2.set_xlabel("angular frequency ω [rad/s]")
        a1.legend(loc="best")
        fig.suptitle(title)
        fig.align_ylabels((a1, a2))
        _save(fig, plt, path)
    return Plot(path, title, "model", source, series)


def plot_margins(path: Path, *, title: str, omega, loops: list) -> Plot:
    """Bode of the loop transfer L(jω) for each (label, response, margins dict): the gain
    crossover with its phase margin, the phase crossover with its gain margin."""
    plt, style = _mpl()
    omega = np.asarray(omega)
    with plt.rc_context(style):
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(9.0, 6.6), sharex=True,
                                     layout="constrained")
        a1.axhline(0.0, color="black", linewidth=0.8)
        series = {}
        for k, (label, h, m) in enumerate(loops):
            c = _COLOURS[k % len(_COLOURS)]
            mag = 20 * np.log10(np.abs(h))
            ph = _phase_deg(h)
            wc, pm = m.get("crossover_rad_s"), m.get("phase_margin_deg")
            if wc and pm is not None:   # the branch where the crossover sits at −180° + PM
                ph += 360.0 * round((-180.0 + pm - np.interp(math.log(wc), np.log(omega), ph))
                                    / 360.0)
            words = [f"PM {pm:.0f}°" if pm is not None else "PM -"]
            gm = m.get("gain_margin_upper")
            words.append(f"GM {gm:.3g} ({20 * math.log10(gm):.1f} dB)" if gm else "GM ∞")
            if m.get("gain_margin_lower"):
                words.append(f"lower GM {m['gain_margin_lower']:.2g}")
            a1.semilogx(omega, mag, color=c, label=f"{label}: " + ", ".join(words))
            a2.semilogx(omega, ph, color=c)
            series[label] = (omega, h)
            if wc and pm is not None and omega[0] <= wc <= omega[-1]:
                a1.plot([wc], [0.0], "o", color=c, markersize=5)
                a2.plot([wc, wc], [-180.0, -180.0 + pm], color=c, linewidth=2.2)
                a2.plot([wc], [-180.0 + pm], "o", color=c, markersize=5)
            wp = m.get("phase_crossover_rad_s")
            if gm and wp and omega[0] <= wp <= omega[-1]:
                a1.plot([wp, wp], [0.0, -20 * math.log10(gm)], color=c, linewidth=2.2)
                a1.plot([wp], [-20 * math.log10(gm)], "s", color=c, markersize=5)
        a2.axhline(-180.0, color="black", linewidth=0.8)
        a1.set_ylabel("|L| [dB]")
        a2.set_ylabel("phase of L [deg]")
        a2.set_xlabel("angular frequency ω [rad/s]")
        lo = min(-200.0, *(float(np.min(_phase_deg(h))) for _, h, _ in loops)) if loops else -360
        a2.set_ylim(max(lo, -540.0) - 10, 10)
        a1.legend(loc="lower left")
        a1.text(0.995, 0.98, "● gain crossover, bar: phase margin\n■ phase crossover, bar: "
                "gain margin", transform=a1.transAxes, ha="right", va="top", fontsize=8)
        fig.suptitle(title)
        fig.align_ylabels((a1, a2))
        _save(fig, plt, path)
    return Plot(path, title, "margins", None, series)


def plot_sweeps(path: Path, *, title: str, groups: list, unit: str, amplitude_unit: str) -> Plot:
    """Per sweep step (a group of bars), one bar per amplitude: the mean over its repeats,
    whiskers from min to max, each push as a dot. Panels: peak |error|, IAE, settling
    time. ``groups``: (label, pushes) with pushes as in the summary."""
    plt, style = _mpl()
    panels = (("peak", f"peak |error| [{unit}]"),
              ("iae", f"IAE [{'s' if unit in ('', '1') else unit + '·s'}]"),
              ("settling_s", "settling time [s]"))
    amps = sorted({p["amplitude"] for _, pushes in groups for p in pushes},
                  key=lambda a: (abs(a), a))
    width = 0.8 / max(len(amps), 1)
    with plt.rc_context(style):
        fig, axes = plt.subplots(1, 3, figsize=(11.0, 4.0), layout="constrained")
        series = {}
        x = np.arange(len(groups))
        for ax, (key, label) in zip(axes, panels):
            for j, a in enumerate(amps):
                c = _COLOURS[j % len(_COLOURS)]
                xs = x + (j - (len(amps) - 1) / 2) * width
                for xi, (name, pushes) in zip(xs, groups):
                    done = [p for p in pushes if p["amplitude"] == a and p.get("iae") is not None]
                    vals = np.array([p[key] for p in done if p.get(key) is not None], float)
                    series[f"{name}: {key} at {a:g}"] = (np.arange(len(vals)), vals)
                    if len(vals):
                        m = float(vals.mean())
                        ax.bar(xi, m, width * 0.9, color=c, alpha=0.55,
                               label=f"push {a:g}{unit_text(amplitude_unit)}" if xi == xs[0]
                               else None)
                        ax.errorbar(xi, m, yerr=[[m - vals.min()], [vals.max() - m]],
                                    fmt="none", ecolor="black", capsize=3, linewidth=0.9)
                        ax.plot(np.full(len(vals), xi), vals, ".", color=c, markersize=5)
                    missing = len(done) - len(vals)
                    if missing:
                        ax.annotate(f"{missing} never\nsettled", (xi, 0), xytext=(0, 3),
                                    textcoords="offset points", ha="center", va="bottom",
                                    fontsize=7, color="#b22222")
            ax.set_xticks(x, [g[0] for g in groups])
            ax.set_xlim(-0.5, len(groups) - 0.5)
            ax.set_ylabel(label)
            ax.set_ylim(bottom=0)
        axes[0].legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=2, frameon=False)
        fig.suptitle(title + "\n(bars: mean over the repeats; whiskers: min to max; dots: "
                     "each push)")
        _save(fig, plt, path)
    return Plot(path, title, "sweep", None, series)

"""``libration plot``: a one-page PNG summary of an output file (matplotlib is an optional extra)."""
from __future__ import annotations

import os

import numpy as np

from ..exceptions import ValidationError
from .output import open_output


def _matplotlib():
    try:
        import matplotlib
    except ImportError:
        raise ValidationError("libration plot needs matplotlib, an optional extra: "
                              "pip install 'libration[plot]'") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def plot_output(path: str | os.PathLike, target: str | os.PathLike, max_particles: int = 500) -> None:
    """Write a PNG: x-y and x-z orbit projections, |relative energy error| against time (log),
    and semi-major axis, eccentricity and inclination of the massive bodies against time.

    Parameters
    ----------
    path : str or path-like
        A libration output file.
    target : str or path-like
        The PNG to write.
    max_particles : int
        At most this many test particles are drawn (their final positions).
    """
    plt = _matplotlib()
    out = open_output(path)
    if len(out) == 0:
        raise ValidationError(f"{os.fspath(path)} holds no snapshots yet; nothing to plot")
    mass0 = out.mass[0]
    massive = np.flatnonzero(np.nan_to_num(mass0) > 0)
    tests = np.flatnonzero(np.nan_to_num(mass0) == 0)[:max(0, int(max_particles))]
    length, time_unit = out.attrs.get("length_unit", ""), out.attrs.get("time_unit", "")
    elements = out.elements
    primary = out.elements_primary
    if elements is None and len(massive) > 1:
        elements, primary = _elements_of_massive(out, massive)
    fig, axes = plt.subplots(2, 3, figsize=(15, 9), constrained_layout=True)
    fig.suptitle(f"{os.path.basename(os.fspath(path))}: {out.attrs.get('method', '')}, "
                 f"{len(out.names):,} bodies, {len(out)} snapshots")
    for ax, (i, j, label) in zip(axes[0, :2], [(0, 1, "y"), (0, 2, "z")]):
        if len(tests):
            final = out.position[-1, tests]
            ax.scatter(final[:, i], final[:, j], s=1, color="0.6", label="test particles (final)")
        for k, b in enumerate(massive):
            ax.plot(out.position[:, b, i], out.position[:, b, j], lw=0.8, label=out.names[b], color=f"C{k % 10}")
        ax.set_xlabel(f"x [{length}]")
        ax.set_ylabel(f"{label} [{length}]")
        ax.set_aspect("equal", adjustable="datalim")
        ax.set_title(f"orbits, x-{label} projection")
    axes[0, 0].legend(fontsize="small", loc="upper right", markerscale=4)
    ax = axes[0, 2]
    error = np.abs(out.energy_error)
    shown = error > 0
    ax.semilogy(out.time[shown], error[shown], lw=0.8)
    ax.set_xlabel(f"time [{time_unit}]")
    ax.set_ylabel("|E - E0| / |E0|")
    ax.set_title("relative energy error")
    labels = [("semi_major_axis", f"semi-major axis [{length}]", 1.0),
              ("eccentricity", "eccentricity", 1.0), ("inclination", "inclination [deg]", 180 / np.pi)]
    for ax, (name, label, scale) in zip(axes[1], labels):
        if elements is not None:
            for k, b in enumerate(massive):
                if out.names[b] == primary:
                    continue
                ax.plot(out.time, elements[name][:, b] * scale, lw=0.8, label=out.names[b], color=f"C{k % 10}")
            ax.legend(fontsize="small")
        else:
            ax.text(0.5, 0.5, "no orbital elements", ha="center", va="center", transform=ax.transAxes)
        ax.set_xlabel(f"time [{time_unit}]")
        ax.set_ylabel(label)
        ax.set_title(f"{label.split(' [')[0]} about {primary}" if primary else label)
    fig.savefig(os.fspath(target), dpi=110)
    plt.close(fig)


def _elements_of_massive(out, massive: np.ndarray):
    """Heliocentric elements of the massive bodies about the first one (when none were stored)."""
    from ..elements import elements_from_state

    k, n = len(out), len(out.names)
    values = {name: np.full((k, n), np.nan) for name in ("semi_major_axis", "eccentricity", "inclination")}
    for s in range(k):
        mass = np.nan_to_num(out.mass[s, massive])
        if mass[0] <= 0:
            continue
        with np.errstate(all="ignore"):
            el = elements_from_state(mass, out.position[s, massive], out.velocity[s, massive],
                                     len(massive), out.G, frame="heliocentric", primary=0)
        for name in values:
            values[name][s, massive[1:]] = getattr(el, name)
    return values, out.names[massive[0]]

"""The ``health`` command: how well a link works, from one capture."""

from __future__ import annotations

import re
from pathlib import Path

import click

import iqdemod

from .._common import finite, guard_outputs, link_options, links_from_options, open_output, say
from ..render import health_links_json, health_links_text, health_text, to_json, wrote

__all__ = ["command"]

@click.command("health")
@click.argument("capture", type=click.Path(path_type=Path))
@link_options(several=True, several_do=("assess several links in one pass over the capture: one report per link, "
                                        "headed by its name"))
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="BER the margin is measured against.")
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object instead of the report for people (several links: their reports "
                   "under \"links\", by name).")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a PNG: BER curves with this capture's operating point, and the decision statistics. "
                   "Several links: one PNG each, the link's name put before the suffix (weak.buoys.png).")
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path),
              help="Write the report here instead of stdout.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar.")
def command(capture, target_ber, as_json, plot, output, quiet, **link_kw) -> None:
    """Assess a link: Eb/N0, predicted and observed error rates, margin, transmitter health.

    Eb/N0 comes from the receiver's own decision statistics (data-aided on
    frames whose CRC passed, blind on the others). The predicted rates use
    non-coherent detection theory for this link's tone spacing and residual
    frequency error; the observed frame error rate is compared with them by an
    exact binomial test. The margin is measured against what the theory needs,
    less the small gain of this receiver's filter; both are shown, with the
    coherent reference beside them. The report begins with the link's
    parameters and the recording's start time. Statistical estimates, not a
    certification. With several links (--link given again, or a profile with
    several [[signal]] entries) the capture is read once for all of them and
    each link gets its own report.
    """
    link, link_paths = links_from_options(link_kw)
    plots = _plot_paths(plot, list(link) if isinstance(link, dict) else None)
    guard_outputs([("--output", output)] + [("--plot", p) for p in plots.values()], captures=[capture],
                  link=link_paths)
    if plot is not None:
        from iqdemod.plots import require_matplotlib

        require_matplotlib()  # fail before the work, not after
    if isinstance(link, dict):
        out = iqdemod.health.assess_links(capture, link, target_ber=target_ber, progress=not quiet,
                                          keep_frames=False)
        reports = {name: report for name, (report, _) in out.items()}
        text = to_json(health_links_json(reports)) if as_json else health_links_text(reports)
    else:
        reports = {None: iqdemod.health.assess(capture, link, target_ber=target_ber, progress=not quiet)}
        text = to_json(reports[None].as_dict()) if as_json else health_text(reports[None])
    with open_output(output) as out_fh:
        out_fh.write(text + "\n")
    if plots:
        from iqdemod.plots import plot_health

        for name, path in plots.items():
            plot_health(path, reports[name])
            if not quiet:
                say(wrote(path))


def _plot_paths(plot: Path | None, names: list[str] | None) -> dict[str | None, Path]:
    """Where each link's PNG goes: `plot` itself for one link (key None); for several, `plot` with the
    link's name before its suffix, any character but letters, digits, '.', '_' and '-' made '_'."""
    if plot is None:
        return {}
    if names is None:
        return {None: plot}
    if str(plot) == "-":
        raise click.BadParameter("several links need a file name (one PNG per link), not -", param_hint="--plot")
    return {name: plot.with_name(f"{plot.stem}.{re.sub(r'[^A-Za-z0-9._-]', '_', name)}{plot.suffix}")
            for name in names}

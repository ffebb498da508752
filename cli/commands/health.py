"""The ``health`` command: how well a link works, from one capture."""

from __future__ import annotations

from pathlib import Path

import click

import iqdemod

from .._common import finite, guard_outputs, link_from_options, link_options, open_output, say
from ..render import health_text, to_json, wrote

__all__ = ["command"]


@click.command("health")
@click.argument("capture", type=click.Path(path_type=Path))
@link_options
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="BER the margin is measured against.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of the report for people.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path),
              help="Write a PNG: BER curves with this capture's operating point, and the decision statistics.")
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
    certification.
    """
    link_path = link_kw.get("link")
    link = link_from_options(link_kw)
    guard_outputs([("--output", output), ("--plot", plot)], captures=[capture], link=link_path)
    if plot is not None:
        from iqdemod.plots import require_matplotlib

        require_matplotlib()  # fail before the work, not after
    report = iqdemod.health.assess(capture, link, target_ber=target_ber, progress=not quiet)
    with open_output(output) as out:
        out.write((to_json(report.as_dict()) if as_json else health_text(report)) + "\n")
    if plot is not None:
        from iqdemod.plots import plot_health

        plot_health(plot, report)
        if not quiet:
            say(wrote(plot))

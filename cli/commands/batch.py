"""The ``batch`` command: link health of a whole archive, on every core or on a Dask cluster."""

from __future__ import annotations

from pathlib import Path

import click

from iqdemod import batch as B

from .._common import (EXIT_FAILED, EXIT_OK, finite, link_options, link_overrides, link_profiles, links_from_options,
                       say)
from .._signals import Terminated
from ..render import batch_summary, wrote

__all__ = ["command"]


@click.command("batch")
@click.argument("paths", nargs=-1, required=True, type=click.Path())
@link_options(several=True, several_do=("assess several links of each capture in one read: a report row per "
                                        "capture and link (link_name), and frames carry their link's name"))
@click.option("-o", "--output", "report", required=True, type=click.Path(dir_okay=False, path_type=Path),
              help="The CSV report, one row per capture and link (written atomically when the batch is done).")
@click.option("--frames", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Also write every frame of every capture to this JSON Lines file.")
@click.option("-j", "--jobs", type=click.IntRange(1, 1024), default=None,
              help="Worker processes [default: one per core]; 1 runs in this process.")
@click.option("--resume", is_flag=True,
              help="Keep the captures an earlier (or killed) run finished with status ok and unchanged size, "
                   "mtime and link (every link's row, with several); failed ones are tried again.")
@click.option("--cluster", metavar="ADDRESS", default=None,
              help="Send the work to a running Dask scheduler, e.g. tcp://10.0.0.5:8786 "
                   "(needs pip install 'iqdemod[cluster]').")
@click.option("--target-ber", type=finite(0, 0.5, min_open=True, max_open=True), default=1e-5,
              show_default=True, help="The BER the margin is measured against.")
@click.option("--plot", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write a PNG of Eb/N0 and frame error rate against capture time, one line per transmitter.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar and no summary.")
@click.pass_context
def command(ctx, paths, report, frames, jobs, resume, cluster, target_ber, plot, quiet, **link_kw) -> None:
    """Assess every capture of an archive and write one CSV row per capture and link.

    PATH is a capture file, a folder (searched recursively) or a glob pattern
    (quote it; ** reaches into subfolders). A SigMF pair counts once; .sigmf archives, WAV/FLAC
    and raw IQ files (named by their SigMF datatype, e.g. .cu8 .ci16_le
    .cf32_le, or .raw .iq .bin; they need --datatype and --rate or a
    profile's [capture] table) are taken too; anything else, *.truth.json
    included, is skipped.

    Several links (--link given again, or a profile with several [[signal]]
    entries) are assessed in one read of each capture: a row per capture and
    link, named in link_name, and each frame carries its link's name as link.

    A folder holding a link.toml gives its own link profile (or profiles: one
    per [[signal]] entry) to the captures below it (the flags still override
    it), and names their transmitter; otherwise transmitters are told apart by
    their carrier error, each link's apart.

    A capture that fails does not stop the batch: its row says why. Rows (and
    frames) are saved as each capture finishes, in REPORT.partial, so a killed
    or interrupted run keeps every finished capture: run the same command with
    --resume to finish it. Exit status: 0 when every capture was processed,
    1 when any failed, 130 after Ctrl-C, 128 + the signal's number after
    SIGTERM (143), SIGHUP (129) or SIGQUIT (131). The report, the frames file,
    their journals and the plot must be regular files and none of them an
    input (a capture, a profile).
    """
    overrides = link_overrides(link_kw)
    if jobs is not None and cluster is not None:
        raise click.UsageError("--jobs and --cluster exclude each other (the cluster has its own workers)")
    # Without --link and without the two values every link needs, each capture must find a
    # folder link.toml (the library says so if one does not).
    link, link_paths = links_from_options(link_kw, optional=True)
    try:
        # the group makes SIGTERM, SIGHUP and SIGQUIT raise Terminated, a KeyboardInterrupt: the batch
        # stops as after Ctrl-C and keeps every finished capture
        result = B.run_batch(
            paths, link, report=report, frames=frames, jobs=jobs, resume=resume, cluster=cluster,
            target_ber=target_ber, link_overrides=overrides, plot=plot, progress=not quiet,
            link_source=link_profiles(link, link_paths), inputs=[("--link profile", p) for p in link_paths],
        )
    except KeyboardInterrupt as exc:
        say(f"interrupted: every finished capture is kept in {B.partial_path(report)}; "
            "run the same command with --resume to finish")
        ctx.exit(128 + exc.signum if isinstance(exc, Terminated) else 130)
    if not quiet:
        for line in batch_summary(result):
            say(line)
        if plot is not None:
            say(wrote(plot))
    ctx.exit(EXIT_FAILED if result.n_failed else EXIT_OK)

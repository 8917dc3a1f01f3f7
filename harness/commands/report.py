"""The `report` and `replay` subcommands.

`register(subparsers)` adds the parsers; each `cmd_*` handler imports what it needs when it runs (so
`grasp-harness --help` stays fast) and returns the exit code. Bad input (no run folder, an unknown
trial key, a campaign file that is missing or changed) prints one error line and gives exit code 2.
`replay` gives 1 when the replayed row differs from the journal's.
"""

from __future__ import annotations

import sys

from ..constants import ENGINES

__all__ = ["register", "cmd_report", "cmd_replay"]

SHOWN_DIFFERENCES = 12  # columns listed when a replay does not match


# subcommand -> (one-line help, description)
ABOUT = {
    "report": ("write a run's results as one self-contained HTML page",
               "Write one HTML file (figures embedded, no network or JavaScript needed) with the run's metadata, "
               "outcomes, success-rate heat map with intervals, slip and drift per variant, object difficulty, the "
               "worst trials with a rendered frame of each replay, and with --against the regression verdicts of "
               "RUN (candidate) against BASE."),
    "replay": ("re-simulate one trial of a run, render it, and check it reproduces the journal",
               "Re-simulate one trial of a run in a fresh physics client, optionally render it (CPU renderer, "
               "contacts drawn as discs coloured by slip speed, arrows along the slip) to PNG frames and/or an "
               "animated GIF, then compare the replayed row with the journal's, column by column and bit for bit "
               "(wall_s ignored). Exit code 1 when they differ."),
}


def register(subparsers):
    """Add the report and replay subcommands to an argparse subparsers object."""
    r = _command(subparsers, "report", *ABOUT["report"])
    r.add_argument("--against", metavar="BASE", help="baseline run folder to compare RUN with")
    r.add_argument("--out", required=True, metavar="FILE.html", help="the HTML file to write")
    r.add_argument("--worst", type=int, default=2, metavar="N",
                   help="trials shown per kind of worst trial: dropped, largest slip, largest drift (default 2)")
    p = _command(subparsers, "replay", *ABOUT["replay"])
    p.add_argument("trial_key", metavar="TRIAL_KEY", help="the trial's key (a unique prefix is enough)")
    p.add_argument("--frames", metavar="DIR", help="write PNG frames into this folder")
    p.add_argument("--gif", metavar="FILE", help="write an animated GIF")
    p.add_argument("--every", type=int, metavar="N",
                   help="render every N-th sample of the trial (default: about 30 frames per simulated second)")
    p.add_argument("--size", default="480x360", metavar="WxH", help="frame size in pixels (default 480x360)")
    p.add_argument("--engine", choices=ENGINES, help="re-simulate on this physics engine instead of the run's "
                                                     "(the rows then differ; frames need pybullet)")


def _command(subparsers, name, summary, description):
    """A subcommand reading a run folder, with the --campaign option both commands share."""
    parser = subparsers.add_parser(name, help=summary, description=description)
    parser.add_argument("run", metavar="RUN", help="run folder")
    parser.add_argument("--campaign", metavar="FILE",
                        help="the campaign file the run was made from (default: the path recorded in "
                             "RUN/campaign.json, read from the current folder)")
    return parser


def _bad_input(work):
    from ..errors import HarnessError
    try:
        return work()
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


def cmd_report(args):
    def work():
        from ..safety import SAFETY
        from ..errors import HarnessError
        from ..views.report import build_report
        if args.worst < 0:
            raise HarnessError(f"--worst must be 0 or more; got {args.worst}")
        report = build_report(args.run, args.out, against=args.against, worst=args.worst,
                              campaign_file=args.campaign)
        same = sum(1 for _, match, _ in report.replays if match)
        print(f"{report.path}: {report.images} figure(s), {len(report.replays)} replayed trial(s) "
              f"({same} matching the journal bit for bit), built in {report.seconds:.1f} s")
        print(f"\n{SAFETY}")
        return 0
    return _bad_input(work)


def cmd_replay(args):
    def work():
        from ..views.replay import IGNORED_COLUMNS, replay
        width, height = _size(args.size)
        result = replay(args.run, args.trial_key, frames=args.frames, gif=args.gif, every=args.every,
                        width=width, height=height, campaign_file=args.campaign, engine=args.engine)
        source = result.source
        print(f"trial {source.task.trial_key}: {source.title()}, seed {source.payload['seed']}; "
              f"outcome {result.row.get('outcome')}")
        if result.frame_dir is not None:
            print(f"frames: {result.frames_written} PNG file(s) in {result.frame_dir}")
        if result.gif is not None:
            print(f"animation: {result.gif} ({result.frames_written} frame(s))")
        if result.render_differences is not None:
            print("rendering left the physics unchanged (rendered pass = unrendered pass, bit for bit)"
                  if not result.render_differences else
                  f"WARNING: rendering changed {len(result.render_differences)} column(s): "
                  + ", ".join(c for c, *_ in result.render_differences))
        if source.logged is None:
            print("the journal holds no row for this trial yet: nothing to compare")
            return 1
        columns = len([k for k in result.row if k not in IGNORED_COLUMNS])
        if result.matches:
            print(f"match: all {columns} columns equal the journal's bit for bit ({', '.join(IGNORED_COLUMNS)} ignored)")
            return 0
        print(f"MISMATCH: {len(result.differences)} of {columns} column(s) differ from the journal:")
        for column, logged, replayed in result.differences[:SHOWN_DIFFERENCES]:
            print(f"  {column}: journal {logged!r}, replay {replayed!r}")
        return 1
    return _bad_input(work)


def _size(text):
    from ..errors import HarnessError
    try:
        width, height = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise HarnessError(f"--size must be WIDTHxHEIGHT in pixels, e.g. 480x360; got {text!r}") from None
    if not (16 <= width <= 4096 and 16 <= height <= 4096):
        raise HarnessError(f"--size must be between 16 and 4096 pixels a side; got {text!r}")
    return width, height

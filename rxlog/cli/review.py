"""Morning review commands: the night report and its labelling page, event listings, labels."""

from __future__ import annotations

import getpass
import sys

import click

from rxlog.cli.base import station_command
from rxlog.store import CLASSES, LABELS


class _Progress:
    """click progress bar on stderr, opened on the first report of progress."""

    def __init__(self, label):
        self.label, self.bar, self.done = label, None, 0

    def __call__(self, done, total):
        if self.bar is None:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(done - self.done)
        self.done = done
        if done >= total:
            self.bar.__exit__(None, None, None)


@station_command("review")
@click.option("--night", metavar="YYYY-MM-DD", help="Local date on which the night begins (noon to noon). "
              "Default: the latest complete night with data.")
@click.option("--serve", is_flag=True, help="After writing the report, serve it with labelling until Ctrl-C.")
@click.option("--port", type=click.IntRange(0, 65535), default=8765, show_default=True, help="Port for --serve.")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address for --serve; anything but loopback needs --allow-remote and --access-token.")
@click.option("--allow-remote", is_flag=True, help="Allow --host to be a non-loopback address.")
@click.option("--access-token", envvar="RXLOG_REVIEW_TOKEN", metavar="TEXT",
              help="Secret every visitor must present (?key=TEXT); required with --allow-remote. "
                   "Default: $RXLOG_REVIEW_TOKEN.")
def review(cfg, night, serve, port, host, allow_remote, access_token):
    """Write the morning report of one night and print its summary; --serve to label events.

    The report folder (under the storage root's reports/) holds index.html with the
    plots beside it; it opens from disk and can be copied elsewhere. The page lists the
    night's episodes (a Jovian storm, a Type III group, a Type IV: one card each, its
    bursts folded inside) and the bursts of no episode. With --serve the page on
    http://127.0.0.1:PORT/ saves labels to the event store as you choose them; a label
    given to an episode is its bursts' label too, unless a burst carries its own.

    \b
    Keys on the page:
      j or Down              next item (or burst of an open episode)
      k or Up                previous item
      u                      next unlabelled item
      o                      open or close the bursts of the episode
      1 2 3 4 5 6 7 8 9 0    label the item (each label button shows its key)
      n                      type a note, saved with the next label (Enter or Escape ends the note)
      ?                      jump to the list of keys

    \b
    Example:
      rxlog review --config station.toml
      rxlog review --config station.toml --night 2027-02-03 --serve --port 8765
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.review.data import default_night
    from rxlog.review.night import parse_night
    from rxlog.review.report import build_report
    from rxlog.review.server import check_bind, serve_review

    if serve:
        check_bind(host, allow_remote, access_token)      # before the minute of work, not after
    chosen = parse_night(cfg, night) if night else default_night(cfg)
    index = build_report(cfg, chosen, progress=_Progress(f"reading the night of {chosen.name}"))
    click.echo((index.parent / "summary.txt").read_text(encoding="utf-8").rstrip())
    click.echo(f"report: {index}")
    if serve:
        def ready(srv):
            url = srv.url + (f"?key={access_token}" if srv.access_token else "")
            click.echo(f"review page: {url}  (Ctrl-C to stop)")

        serve_review(cfg, chosen, host=host, port=port, allow_remote=allow_remote,
                     access_token=access_token, ready=ready)


@station_command("events")
@click.option("--night", metavar="YYYY-MM-DD", help="Only this night (local noon to noon). Default: all events.")
@click.option("--class", "cls", type=click.Choice(CLASSES), help="Only events of this detected class.")
@click.option("--unlabelled", is_flag=True, help="Only events nobody has labelled yet.")
@click.option("--episodes", is_flag=True, help="List episodes (one row per storm, group or long event) "
              "instead of events.")
def events(cfg, night, cls, unlabelled, episodes):
    """List stored events (or, with --episodes, episodes) as a table (local times), oldest first.

    \b
    Examples:
      rxlog events --config station.toml --night 2027-02-03 --class jovian_l --unlabelled
      rxlog events --config station.toml --night 2027-02-03 --episodes
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.review.listing import episode_table, event_table

    table = episode_table if episodes else event_table
    click.echo(table(cfg, night=night, cls=cls, unlabelled=unlabelled))


@station_command("label")
@click.argument("event_id", metavar="ID")
@click.argument("label", metavar="LABEL", type=click.Choice(LABELS))
@click.option("--note", default="", help="Free text kept with the label.")
@click.option("--who", default=None, help="Who labels (default: your login name).")
def label(cfg, event_id, label, note, who):
    """Label one event or episode (a class, 'noise' for nothing real, or 'unsure'); earlier
    labels stay in its history. ID is an event id or an episode id (`rxlog events
    --episodes`); an episode's label is its bursts' label too, unless a burst has its own.

    \b
    Examples:
      rxlog label --config station.toml birchwater-20270202T170756.1-19.543 jovian_l --note "clear arc"
      rxlog label --config station.toml ep-birchwater-20270203T053012.4-18.250 jovian_l --note "Io-B storm"
    """
    # imported on use: `rxlog --help` and the other commands start without this stage
    from rxlog.store import EventStore

    if who is None:
        try:
            who = getpass.getuser()
        except (KeyError, OSError):
            who = ""
    store = EventStore(cfg.store_path)
    try:
        if store.events(event_id=event_id) or not store.episodes(episode_id=event_id):
            store.add_label(event_id, label, note=note, who=who)
            what = ""
        else:
            store.add_episode_label(event_id, label, note=note, who=who)
            n = len(store.episode_bursts(event_id))
            what = f" (an episode: its {n} burst{'s' if n != 1 else ''} take the label unless they carry their own)"
    finally:
        store.close()
    click.echo(f"{event_id}: labelled {label}" + (f" by {who}" if who else "") + (f" — {note}" if note else "")
               + what)

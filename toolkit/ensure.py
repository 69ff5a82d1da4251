"""The entry point every analysis calls first: panels that are built, current, or said not to be.

``ensure_built(settings, console)`` compares the published panels' record with the inputs (by
content) and the settings now (``toolkit.freshness``):

- current: nothing to do;
- missing or stale: prints ``building the panels first (<reason>)`` and builds them (the check
  table and the panels table are printed as `liftlag build` prints them); with
  ``[workspace] auto_build = false`` it refuses instead, naming the reason (exit 1);
- the build fails (bad data, Ctrl-C, another build holding the workspace too long): the error
  stands (its own exit code), and the message says that the last good panels are kept and how
  to read them anyway; unless the user chose so (``--use-last-good`` or
  ``[workspace] on_failed_build = "use_last_good"``): then a warning says
  "the last build failed at ...; results below are from the build of ..." and the analysis runs
  on the last good panels.

Inputs that were found unusable (a failure with exit code 2 or 3 recorded with the same
fingerprint) are not built again by every analysis: run ``liftlag build`` to retry them.
"""

from __future__ import annotations

from dataclasses import dataclass

from rich.markup import escape

from . import freshness, workspace
from .errors import AnalysisError, ConfigError, DataError, LiftlagError, WorkspaceBusy


@dataclass
class Ready:
    """The outcome of :func:`ensure_built`: which build the analysis reads, and what to say about it."""

    settings: object
    build: dict  # the published build's record (fingerprint, finished_at, rows, ...)
    built_now: bool = False
    note: str | None = None  # set when the analysis reads the last good build after a failed one

    def connect(self):
        """A read-only connection on the panels this readiness is about."""
        return workspace.connect(self.settings)


def add_arguments(parser) -> None:
    """The workspace options every analysis command takes (``--use-last-good``)."""
    parser.add_argument(
        "--use-last-good", action="store_true", default=None,
        help="when building the panels fails, read the last good ones (each result says so) instead of "
             "stopping (default: [workspace] on_failed_build)",
    )


def _warn(console, text: str) -> None:
    if console is not None:
        console.print(f"[yellow]note:[/] {escape(text)}")


def _say(console, text: str) -> None:
    if console is not None:
        console.print(escape(text))


def _refuse(exc: LiftlagError, failure: dict, build: dict | None, settings) -> LiftlagError:
    """The build's error, with what the workspace still holds and how to read it anyway."""
    text = str(exc)
    if build is not None:
        text += (
            f"\nthe last build failed at {failure.get('at')}; the panels of the build of {build.get('finished_at')} "
            "are kept, but they were made from earlier inputs or settings. To read them anyway (each result "
            "then says so), add --use-last-good or set [workspace] on_failed_build = \"use_last_good\" in "
            f"{settings.config_path}"
        )
    try:
        refused = type(exc)(text)
    except TypeError:
        refused = AnalysisError(text)
    refused.exit_code = exc.exit_code
    return refused


def _failure_from_state(settings) -> dict:
    return workspace.read_state(settings).get("failed") or {}


def ensure_built(settings, console=None, *, use_last_good: bool | None = None, err_console=None) -> Ready:
    """Build the panels first when they are missing or stale; see the module's docstring.

    Parameters
    ----------
    settings : Settings
    console : rich Console, optional
        Where the build's tables go (None: build silently).
    use_last_good : bool, optional
        Read the last good panels when a build fails (default: ``[workspace] on_failed_build``).
    err_console : rich Console, optional
        Where notes go (default: ``console``).

    Returns
    -------
    Ready
        ``.connect()`` opens the panels; ``.note`` is set when they are the last good ones.

    Raises
    ------
    LiftlagError
        The build failed and the user did not choose to read the last good panels (the build's own
        exit code), or ``auto_build`` is off and the panels are missing or stale (exit 1).
    """
    from .console import run_build

    err_console = err_console or console
    if use_last_good is None:
        use_last_good = settings.workspace.on_failed_build == "use_last_good"
    published = workspace.published_build(settings)
    try:
        record = freshness.current(settings)
    except LiftlagError as exc:  # an input is gone or empty: the build will say so (and fail)
        record, reasons, fp = None, [f"an input cannot be read: {str(exc).splitlines()[0][:200]}"], None
    else:
        fp = freshness.build_fingerprint(record)
        if published is not None and published.get("fingerprint") == fp:
            return Ready(settings, published)
        reasons = freshness.differences(published.get("record") if published else None, record)

    failure = _failure_from_state(settings)
    if fp is not None and failure.get("status") == "failed" and failure.get("fingerprint") == fp \
            and failure.get("exit_code") in (2, 3):
        # These very inputs and settings were found unusable before (bad data or config, not a
        # full disk or Ctrl-C); building again would fail alike.
        kind = {2: ConfigError, 3: DataError}.get(failure.get("exit_code"), AnalysisError)
        error = kind(f"the last build of these inputs failed at {failure.get('at')}: {failure.get('reason')}\n"
                     f"fix it and run `liftlag build -c {settings.config_path}`")
        return _after_failure(settings, error, failure, published, use_last_good, err_console)
    if not settings.workspace.auto_build:
        what = "missing" if published is None else "stale"
        raise AnalysisError(
            f"the panels in {settings.workspace_dir} are {what} ({freshness.summary(reasons)}); run "
            f"`liftlag build -c {settings.config_path}` ([workspace] auto_build = false)"
        )
    _say(err_console, f"building the panels first ({freshness.summary(reasons)})")
    try:
        run_build(settings)
    except WorkspaceBusy:
        if published is None or not use_last_good:
            raise
        note = (f"another process is still building the workspace; results below are from the build of "
                f"{published.get('finished_at')}, made from earlier inputs or settings")
        _warn(err_console, note)
        workspace.accept_stale(settings, published["fingerprint"])
        return Ready(settings, published, note=note)
    except LiftlagError as exc:
        return _after_failure(settings, exc, _failure_from_state(settings), published, use_last_good, err_console)
    except Exception:  # an error of the system (a full disk, ...): the command line's handler words it
        if published is not None and use_last_good:
            return _after_failure(settings, None, _failure_from_state(settings), published, True, err_console)
        if published is not None:
            _warn(err_console, f"the build failed; the panels of the build of {published.get('finished_at')} are kept "
                               "(read them anyway with --use-last-good)")
        raise
    build = workspace.published_build(settings)
    return Ready(settings, build, built_now=True)


def _after_failure(settings, exc: LiftlagError | None, failure: dict, published: dict | None, use_last_good: bool,
                   err_console) -> Ready:
    if published is None or not use_last_good:
        raise _refuse(exc, failure, published, settings) from None
    reason = failure.get("reason") or str(exc)
    note = (f"the last build failed at {failure.get('at')} ({reason.splitlines()[0]}); "
            f"results below are from the build of {published.get('finished_at')}, made from earlier inputs or settings")
    _warn(err_console, note)
    workspace.accept_stale(settings, published["fingerprint"])
    return Ready(settings, published, note=note)

"""One progress bar for long commands (sweeps, catch maps, Monte Carlo, clips).

Drawn on stderr, and only when stderr is a terminal: stdout stays clean for results (and for
`gains`' JSON or C), and logs and pipes get no bar characters.
"""


def progress_bar(*, enabled: bool = True):
    """A rich Progress: description, bar, done/total, time left; removed when finished.

    `enabled=False` gives a bar that draws nothing (for callers that want quiet).
    """
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    console = Console(stderr=True)
    return Progress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(),
                    console=console, disable=not (enabled and console.is_terminal), transient=True)

"""Exit codes and the errors that carry them to the command line.

Every failure a user can cause ends in one of these, printed as one clear message (file, line
and field where there is one) and a documented exit code, never a traceback.
"""

EXIT_OK = 0
EXIT_FAILED = 1          # the network is not well-posed, or readings fail their comparison
EXIT_BAD_INPUT = 2       # an input file or a command-line argument cannot be used
EXIT_OUTPUT_REFUSED = 3  # the output exists (no --force) or cannot be written
EXIT_SOLVER_FAILED = 4   # no solver reached the requested accuracy
EXIT_NO_MEMORY = 5       # the work needs more memory than the machine (or a limit) allows


class UserError(Exception):
    """A failure to report as a message and an exit code."""

    exit_code = EXIT_BAD_INPUT


class InputError(UserError):
    """An input cannot be read or used; the message names the file, line and field."""

    exit_code = EXIT_BAD_INPUT


class OutputRefused(UserError):
    """An output file exists and ``--force`` was not given, or it cannot be written."""

    exit_code = EXIT_OUTPUT_REFUSED


class NotWellPosed(UserError):
    """The network (or its passive version, for resistance queries) fails its checks: it has no
    unique solution. The message carries the check report or the reason."""

    exit_code = EXIT_FAILED


class SolverError(UserError):
    """The linear solve did not reach the requested accuracy."""

    exit_code = EXIT_SOLVER_FAILED


OUT_OF_MEMORY = ("ran out of memory (an allocation failed); close other programs, raise the "
                 "limit, work on a smaller input or use a machine with more memory")


class NotEnoughMemory(UserError):
    """The estimated (or an actual) allocation exceeds the memory available."""

    exit_code = EXIT_NO_MEMORY


MAX_REPORTED_PROBLEMS = 10


class ProblemList:
    """Collects ``FILE:LINE: message`` problems found in one input file; raises them together.

    The first :data:`MAX_REPORTED_PROBLEMS` messages are kept and the rest counted, so a file
    with a million bad rows still gives a short, useful message.
    """

    def __init__(self, path):
        self.path = path
        self.messages = []
        self.count = 0

    def add(self, line: int | str, message: str) -> None:
        """Record a problem at ``line`` (a line number, or ``"row N"`` for files without lines)."""
        self.count += 1
        if len(self.messages) < MAX_REPORTED_PROBLEMS:
            self.messages.append(f"{self.path}:{line}: {message}")

    def raise_if_any(self) -> None:
        """Raise :class:`InputError` listing the problems, if there are any."""
        if self.count:
            more = self.count - len(self.messages)
            raise InputError("\n".join(self.messages + ([f"... and {more} more"] if more else [])))

"""One error hierarchy for the whole package.

Every error the user can cause is a :class:`LoopshiftError`. Its ``str()`` is a single line
that names *where* (file and line, expression and column, or the option/field) and *what*
was expected versus found. The CLI prints that line and exits with code 2.

Subclasses also inherit the matching builtin so library users can catch them naturally
(``InputError`` is a ``ValueError``).
"""

from __future__ import annotations


#: The longest error line; messages quote inputs through ``convert.limits.excerpt``, and this
#: cap catches any that does not.
MAX_ERROR_CHARS = 400


class LoopshiftError(Exception):
    """Base class for every error loopshift raises on purpose.

    Parameters
    ----------
    message:
        What was expected and what was found, in plain words.
    where:
        Location prefix, e.g. ``"case.toml:12"``, ``"expression column 7"``, ``"--pid"``.
    key:
        The field or option involved, e.g. ``"ti"`` or ``"target.digital.fs"``.
    """

    def __init__(
        self, message: str, *, where: str | None = None, key: str | None = None, settings: tuple[str, ...] = ()
    ):
        self.message = message
        self.where = where
        self.key = key
        #: neutral names of settings the message tells the user to change ("resistor maximum");
        #: each front end says how its user sets them (:meth:`name_settings`)
        self.settings = tuple(settings)
        super().__init__(self.one_line())

    def name_settings(self, names) -> LoopshiftError:
        """Follow each neutral setting the message names with the front end's own name for it,
        e.g. ``{"resistor maximum": "--r-max"}`` on the command line or
        ``{"resistor maximum": "target.circuit.resistor_range"}`` in a case file."""
        for neutral in self.settings:
            if neutral in names:
                self.message = self.message.replace(neutral, f"{neutral} ({names[neutral]})", 1)
        self.settings = ()
        self.args = (self.one_line(),)
        return self

    def one_line(self) -> str:
        parts = []
        if self.where:
            parts.append(self.where)
        if self.key:
            parts.append(self.key)
        prefix = ": ".join(parts)
        text = f"{prefix}: {self.message}" if prefix else self.message
        text = " ".join(text.split())  # guarantee one line
        if len(text) > MAX_ERROR_CHARS:  # never echo a long input back: keep the start and the advice at the end
            half = MAX_ERROR_CHARS // 2 - 10
            text = f"{text[:half]} …[{len(text) - 2 * half:,} characters left out]… {text[-half:]}"
        return text

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.one_line()


class InputError(LoopshiftError, ValueError):
    """A value, expression, file or option the user gave is malformed or out of range."""


class UnrealizableError(LoopshiftError, ValueError):
    """A request that cannot be honoured (e.g. no real continuous equivalent, no topology)."""

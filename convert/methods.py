"""The names of the conversion methods, in one place. No imports: the command line's help text
reads them without loading the numerics.

Each name's mapping lives in :mod:`convert.digital.forward` (analog -> digital, through
:func:`convert.digital.discretize`) and :mod:`convert.digital.inverse` (digital -> analog).
"""

#: Analog -> digital methods, in the order the survey and the help list them.
METHODS: tuple[str, ...] = ("zoh", "foh", "tustin", "matched", "impulse", "forward-euler", "backward-euler")

#: Digital -> analog methods that have a real continuous equivalent (:func:`convert.digital.to_analog`).
INVERSE_METHODS: tuple[str, ...] = ("tustin", "zoh", "matched", "backward-euler")

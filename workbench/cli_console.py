"""How the command line shows warnings: statistical ones once each, one line each; numerical noise hidden.

The workbench's own warning categories (:class:`~workbench.errors.WorkbenchWarning`
and its subclasses: separation, post-outcome predictors, volume dominance, data
quality, units, ...) are what a user must see. Warnings of the numerical
libraries (``RuntimeWarning: overflow encountered in exp`` and the like) are
symptoms, usually of one of those red flags; on the console they are only
counted. ``results.json`` and ``run.log`` keep every warning of the run.
"""

from __future__ import annotations

import sys

from workbench import errors


def _subclass_names(cls) -> set[str]:
    names = {cls.__name__}
    for sub in cls.__subclasses__():
        names |= _subclass_names(sub)
    return names


def one_line(message: str) -> str:
    return " ".join(str(message).split())


class ConsoleWarnings:
    """Prints each statistical warning once, as ``warning (Category): message``; counts the rest.

    Use an instance as :func:`warnings.showwarning` for warnings raised live, and
    call :meth:`show` for warnings a run recorded (category name, message).
    """

    def __init__(self, stream=None):
        self.stream = stream
        self.seen: set[tuple[str, str]] = set()
        self.hidden = 0

    @staticmethod
    def is_statistical(category: str) -> bool:
        return category in _subclass_names(errors.WorkbenchWarning)

    def show(self, category: str, message: str) -> None:
        if not self.is_statistical(category):
            self.hidden += 1
            return
        key = (category, one_line(message))
        if key in self.seen:
            return
        self.seen.add(key)
        print(f"warning ({category}): {key[1]}", file=self.stream or sys.stderr)

    def show_all(self, pairs) -> None:
        for category, message in pairs:
            self.show(category, message)

    def __call__(self, message, category, filename, lineno, file=None, line=None):
        self.show(category.__name__, str(message))

    def note_hidden(self, where: str | None) -> None:
        """One line saying how many numerical warnings were not shown (and where they are kept)."""
        if self.hidden:
            kept = f"; {where} lists them" if where else ""
            print(
                f"note: {self.hidden} numerical warning(s) from the computing libraries (such as overflow in exp) "
                f"are not shown{kept}. They usually accompany a warning above.",
                file=self.stream or sys.stderr,
            )
            self.hidden = 0

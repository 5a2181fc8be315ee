"""Warnings recorded per thread, and counted warnings that partitions add up.

Two problems meet here.

* :class:`warnings.catch_warnings` swaps process-wide state (``warnings.showwarning`` and
  the filter list) and puts it back on exit. Two threads that record at the same time (the
  client and an in-process dask worker) then put back each other's state: a warning lands
  in the other thread's list or on stderr. :func:`record_warnings` keeps one list per
  thread instead; the process-wide state is set once, by the first recorder to enter,
  and put back by the last to leave.
* A partitioned scan warns once per partition ("5 of 40 curves ..."), where a
  single-process scan warns once for the layer ("93 of 1200 curves ..."). A warning made
  with :func:`warn_counted` carries its template and counts, so :func:`merge` adds the
  partitions' counts up and words the warning once, as the single-process scan does.
"""

from __future__ import annotations

import threading
import warnings
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Iterator, Mapping, Sequence

__all__ = ["Recorded", "counted", "record_warnings", "warn_counted", "warn_again", "merge",
           "describe"]

#: examples kept in a counted warning ("e.g. a, b, c")
N_EXAMPLES = 3

_lock = threading.Lock()
_local = threading.local()
_depth = 0
_saved: tuple[Any, list] | None = None
_shown: Any = warnings.showwarning  # what shows a warning no recorder takes


@dataclass(frozen=True)
class Recorded:
    """One warning as recorded: plain values, so it pickles between processes."""

    category: type
    text: str
    template: str | None = None            # counted warnings only
    counts: tuple = ()                     # ((name, int), ...)
    fixed: tuple = ()                      # ((name, str), ...): equal in every partition
    examples: tuple = ()
    when: tuple = ()                       # count names: shown only if one of them is > 0

    @property
    def shown(self) -> bool:
        """Whether the warning is shown. A counted warning with ``when`` and all those
        counts zero is only recorded: it brings its other counts (the "of {n}") to
        :func:`merge` from a partition that has nothing to warn about."""
        counts = dict(self.counts)
        return not self.when or any(counts.get(k, 0) > 0 for k in self.when)

    @property
    def key(self) -> tuple:
        """What two partitions' warnings share when they are one warning of the layer."""
        if self.template is None:
            return (self.category, self.text)
        return (self.category, self.template, self.fixed)

    def line(self) -> str:
        """The run record's line: ``Category: text``."""
        return f"{self.category.__name__}: {self.text}"


def _text(template: str, counts: Mapping[str, int], fixed: Mapping[str, Any],
          examples: Sequence[str]) -> str:
    return template.format(**counts, **fixed, examples=", ".join(examples[:N_EXAMPLES]))


def counted(template: str, category: type[Warning], counts: Mapping[str, int],
            fixed: Mapping[str, Any] | None = None, examples: Sequence[str] = (),
            when: Sequence[str] = ()) -> Recorded:
    """A counted warning as :class:`Recorded`, worded from its template (not raised).

    ``template`` is a :meth:`str.format` string naming the ``counts`` (integers), the
    ``fixed`` values (the same in every partition: a parameter, a unit) and
    ``{examples}`` (the first few of ``examples``, comma-separated). With ``when`` (names
    of counts) the warning is shown only if one of those counts is above zero; call it
    also when they are all zero when the template has a total ("{bad} of {n} curves"),
    so that a partitioned scan's total counts every partition.
    """
    fixed_t = tuple((k, str(v)) for k, v in (fixed or {}).items())
    counts_t = tuple((k, int(v)) for k, v in counts.items())
    examples_t = tuple(str(e) for e in examples)[:N_EXAMPLES]
    return Recorded(category, _text(template, dict(counts_t), dict(fixed_t), examples_t),
                    template, counts_t, fixed_t, examples_t, tuple(when))


def warn_counted(template: str, category: type[Warning], counts: Mapping[str, int],
                 fixed: Mapping[str, Any] | None = None, examples: Sequence[str] = (),
                 when: Sequence[str] = (), stacklevel: int = 2) -> None:
    """Warn with counts that a partitioned run adds up over its partitions (see
    :func:`counted` for the arguments)."""
    warn_again([counted(template, category, counts, fixed, examples, when)], stacklevel + 1)


def _recorded(message: Any, category: type) -> Recorded:
    recorded = getattr(message, "_curvescan_recorded", None)
    if isinstance(recorded, Recorded) and recorded.category is category:
        return recorded
    return Recorded(category, str(message))


def _dispatch(message, category, filename, lineno, file=None, line=None) -> None:
    stack = getattr(_local, "stack", None)
    if stack:
        stack[-1].append(_recorded(message, category))
    else:  # a thread that does not record, or a hook some other code put back late
        _shown(message, category, filename, lineno, file, line)


@contextmanager
def record_warnings() -> Iterator[list[Recorded]]:
    """Record every warning raised in this thread while inside, as :class:`Recorded`.

    Unlike :class:`warnings.catch_warnings` this may be used by several threads at once:
    each gets the warnings of its own thread, and warnings of threads that do not record
    are shown as before. Recorders nest; the innermost gets the warning.
    """
    global _depth, _saved, _shown
    caught: list[Recorded] = []
    with _lock:
        if _depth == 0:
            _saved = (warnings.showwarning, list(warnings.filters))
            if _saved[0] is not _dispatch:
                _shown = _saved[0]
            warnings.showwarning = _dispatch
            warnings.simplefilter("always")
        _depth += 1
    stack = getattr(_local, "stack", None)
    if stack is None:
        stack = _local.stack = []
    stack.append(caught)
    try:
        yield caught
    finally:
        stack.pop()
        with _lock:
            _depth -= 1
            if _depth == 0 and _saved is not None:
                warnings.showwarning = _saved[0]
                warnings.filters[:] = _saved[1]
                # tell the warnings module its filter list changed (private; absent in
                # some Python versions, where assigning the list is enough)
                getattr(warnings, "_filters_mutated", lambda: None)()
                _saved = None


def warn_again(recorded: Sequence[Recorded], stacklevel: int = 2) -> None:
    """Raise recorded warnings again, for the caller's own recorder or the user.

    A warning that is not :attr:`~Recorded.shown` goes only to this thread's recorder, if
    one is recording.
    """
    for r in recorded:
        if not r.shown:
            stack = getattr(_local, "stack", None)
            if stack:
                stack[-1].append(r)
            continue
        w = r.category(r.text)
        w._curvescan_recorded = r
        warnings.warn(w, stacklevel=stacklevel + 1)


def merge(recorded: Sequence[Recorded]) -> list[Recorded]:
    """One warning per kind, counts added up, in the order each kind first appeared.

    Counted warnings of the same template and fixed values become one, worded again with
    the summed counts and the first examples; other warnings are kept once per text.
    """
    groups: dict[tuple, list[Recorded]] = {}
    for r in recorded:
        groups.setdefault(r.key, []).append(r)
    out = []
    for members in groups.values():
        first = members[0]
        if first.template is None or len(members) == 1:
            out.append(first)
            continue
        counts: dict[str, int] = {}
        examples: list[str] = []
        for m in members:
            for k, v in m.counts:
                counts[k] = counts.get(k, 0) + v
            examples += [e for e in m.examples if e not in examples]
        examples = examples[:N_EXAMPLES]
        text = _text(first.template, counts, dict(first.fixed), examples)
        out.append(Recorded(first.category, text, first.template, tuple(counts.items()),
                            first.fixed, tuple(examples), first.when))
    return out


def describe(recorded: Sequence[Recorded]) -> list[str]:
    """The run record's ``warnings`` lines (of the warnings shown)."""
    return [r.line() for r in recorded if r.shown]

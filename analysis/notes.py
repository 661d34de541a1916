"""Notes and warnings as records: the words a reader sees, a code that says what the note is
about, and the figures it cites.

A :class:`Note` is a ``str`` (its words), so results, JSON, the page, the report and the
command line show it as they show any note. Code that must tell one note from another (the
Dask engine replacing a note of the search on its sample with one of its own, say) asks its
``code`` and its ``figures``, never its words: the module that writes a note is the only one
that words it.

>>> note = Note("search_scope", "searched on all 40 rows", rows=40)
>>> note, note.code, note.figures["rows"]
('searched on all 40 rows', 'search_scope', 40)
>>> note_code("a plain sentence") is None
True
"""

from __future__ import annotations

__all__ = ["Note", "note_code"]


class Note(str):
    """A note's words, with ``code`` (what it is about) and ``figures`` (what it cites)."""

    code: str
    figures: dict

    def __new__(cls, code: str, text: str, /, **figures):
        note = super().__new__(cls, text)
        note.code = code
        note.figures = dict(figures)
        return note

    def __getnewargs__(self):
        # pickled (results travel between Dask's processes) with its code and words;
        # the figures travel as the instance's state
        return self.code, str(self)


def note_code(note) -> str | None:
    """The code of a :class:`Note`, or None for a note that is words only."""
    return getattr(note, "code", None)

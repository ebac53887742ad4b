"""Outcomes as codes: programs branch on a code, people read the sentence made from it.

Every per-part outcome kinset reports (a dataset row's ``status`` and ``note``, an
unmatched part's ``stage`` and ``reason``) is decided as a stable lower-case code first.
Each code has one entry in a :class:`Catalogue`, shipped as ``kinset/notes/<room>.yaml``:
the least status it gives a part and the template of its sentence. Sentences are made
from codes in one place (:func:`compose`), at the edge, so rewording a template changes
what people read and
nothing that a program decides (``tests/test_outcomes.py`` rewords every template and
shows the tables, the sets and the report's groupings unchanged).

A dataset table carries ``reason_code``: the codes of a row's notes, in the order of
its notes, joined by ``;`` (empty for a clean row). The first code is the one that
decided the status when the row is rejected or has no fitted model.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Callable, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

STATUSES = ("ok", "warning", "rejected")
SEVERITY = {s: i for i, s in enumerate(STATUSES)}
CODE_SEPARATOR = ";"
NOTE_SEPARATOR = "; "
CODE_PATTERN = re.compile(r"^[a-z][a-z0-9_]*$")


@dataclass(frozen=True)
class Note:
    """One outcome: its stable code, the least status it gives, its sentence.

    ``text`` is a :meth:`str.format` template over the fields the diagnosis gives
    (``"{count} reading(s) ... left out"``); ``status`` is ``ok`` for a note that only
    informs.
    """

    code: str
    status: str
    text: str

    def __post_init__(self) -> None:
        if not CODE_PATTERN.match(self.code):
            raise ValueError(f"outcome code '{self.code}' is not lower-case letters, digits, _")
        if self.status not in SEVERITY:
            raise ValueError(f"outcome '{self.code}': status '{self.status}' is not one of "
                             f"{', '.join(STATUSES)}")


class Catalogue(Mapping[str, Note]):
    """The notes one room of kinset can give, by code (registered in :data:`CATALOGUES`)."""

    def __init__(self, name: str, notes: Iterable[Note]) -> None:
        self.name = name
        self._notes: dict[str, Note] = {}
        for note in notes:
            if note.code in self._notes:
                raise ValueError(f"catalogue '{name}': code '{note.code}' given twice")
            self._notes[note.code] = note
        CATALOGUES[name] = self

    def __getitem__(self, code: str) -> Note:
        return self._notes[code]

    def __iter__(self):
        return iter(self._notes)

    def __len__(self) -> int:
        return len(self._notes)

    @classmethod
    def load(cls, name: str, extra: Iterable[Note] = ()) -> "Catalogue":
        """The catalogue shipped as ``kinset/notes/<name>.yaml`` (code -> status, text),
        plus ``extra`` notes made in code (for codes generated from the registry)."""
        import yaml
        from importlib import resources
        text = (resources.files("kinset") / "notes" / f"{name}.yaml").read_text(encoding="utf-8")
        # libyaml's safe loader where PyYAML has it: the same data, 0.03 s less start-up
        if hasattr(yaml, "CSafeLoader"):
            entries = yaml.load(text, Loader=yaml.CSafeLoader) or {}
        else:
            entries = yaml.safe_load(text) or {}
        return cls(name, [*(Note(code, e["status"], e["text"]) for code, e in entries.items()),
                          *extra])

    def text(self, code: str, **fields) -> str:
        """The sentence of ``code`` with its fields filled in."""
        return self._notes[code].text.format(**fields)

    def reword(self, change: Callable[[str], str]) -> dict[str, Note]:
        """Replace every template by ``change(template)``; returns the old notes (to restore)."""
        old = dict(self._notes)
        self._notes = {c: Note(c, n.status, change(n.text)) for c, n in old.items()}
        return old

    def restore(self, old: dict[str, Note]) -> None:
        self._notes = dict(old)


# Every catalogue by name; filled as modules that own one are imported.
CATALOGUES: dict[str, Catalogue] = {}

FieldValue = object   # a per-part array, a scalar, or a callable of the part's index


@dataclass
class Finding:
    """One code found on some parts: where (a mask over parts) and the fields of its sentence.

    A field is a per-part array (indexed by the part), a scalar shared by all, or a
    callable taking the part's index (for values formatted only where the code is found).
    ``status`` overrides the catalogue's least status for this finding (``None``: keep it).
    """

    code: str
    where: np.ndarray
    fields: dict[str, FieldValue] = field(default_factory=dict)
    status: str | None = None

    def fields_of(self, i: int) -> dict[str, object]:
        out = {}
        for name, value in self.fields.items():
            if callable(value):
                out[name] = value(i)
            elif isinstance(value, (np.ndarray, list, tuple, pd.Series)):
                out[name] = value[i]
            else:
                out[name] = value
        return out


def compose(n: int, findings: Sequence[Finding], catalogue: Catalogue
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Status, note and reason code of ``n`` parts from their findings.

    A part's notes are the sentences of its findings in the order the findings are
    given; its status is the most severe status among them (``ok`` if none); its
    ``reason_code`` the codes in the same order, joined by ``;``.
    """
    severity = np.zeros(n, dtype=np.int8)
    texts: list[list[str]] = [[] for _ in range(n)]
    codes: list[list[str]] = [[] for _ in range(n)]
    for f in findings:
        note = catalogue[f.code]
        rank = SEVERITY[f.status or note.status]
        where = np.flatnonzero(np.asarray(f.where, dtype=bool))
        if not len(where):
            continue
        severity[where] = np.maximum(severity[where], rank)
        for i in where:
            texts[i].append(note.text.format(**f.fields_of(i)))
            codes[i].append(f.code)
    status = np.asarray(STATUSES, dtype=object)[severity]
    note_col = np.asarray([NOTE_SEPARATOR.join(t) for t in texts], dtype=object)
    code_col = np.asarray([CODE_SEPARATOR.join(c) for c in codes], dtype=object)
    return status, note_col, code_col


def cell_codes(cell) -> list[str]:
    """The codes of one ``reason_code`` cell (empty list for a blank or missing cell):
    for one row at a time, where a Series per call would cost more than the split."""
    if cell is None or (not isinstance(cell, str) and pd.isna(cell)):
        return []
    return [c for c in str(cell).split(CODE_SEPARATOR) if c]


def split_codes(column) -> list[list[str]]:
    """The codes of each row of a ``reason_code`` column (empty list for a blank cell)."""
    return [cell_codes(cell) for cell in pd.Series(column, dtype=object).fillna("").astype(str)]


def has_code(column, *codes: str) -> np.ndarray:
    """Whether each row of a ``reason_code`` column holds any of ``codes``."""
    wanted = set(codes)
    return np.asarray([bool(wanted.intersection(c)) for c in split_codes(column)], dtype=bool)


def first_code(column) -> np.ndarray:
    """The first code of each row of a ``reason_code`` column ('' where none)."""
    return np.asarray([c[0] if c else "" for c in split_codes(column)], dtype=object)


def first_clause(note: str) -> str:
    """The opening clause of a note, as quoted in a reason that refers to it.

    Only for quoting to people: no program decides anything from the words.
    """
    return str(note or "").split(NOTE_SEPARATOR)[0]

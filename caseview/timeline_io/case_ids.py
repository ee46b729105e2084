"""Case IDs: one spelling per person, whatever the keyboard or the spreadsheet did to it.

Rules (applied by the importer to every case ID; :func:`normalise_case_id` is the one function
for anything else that takes a case ID from a person, such as recording a single contact; a typed
ID is looked up with :meth:`caseview.storage.Workspace.find_case`, which applies
:func:`match_case_id`; coordinator codes follow rules 1-6 too, see :class:`CoordinatorBook`,
:func:`match_coordinator_code` and :meth:`caseview.storage.Workspace.find_coordinator`):

1. **Refused**: control characters (tab, line break, ...), or nothing left after the steps below.
2. **Invisible characters removed**: zero-width spaces and joiners, the byte-order mark, soft
   hyphens, direction marks (Unicode category Cf).
3. **NFKC** (Unicode compatibility normalisation): full-width digits and letters become plain ones
   (``ＨＳ－０００１`` -> ``HS-0001``), no-break spaces become spaces.
4. **One dash**: every Unicode dash (category Pd) and the minus sign become ``-``.
5. **Spaces**: surrounding spaces are removed and runs of inner spaces become one.
6. **Letter case**: IDs are matched without regard to letter case. The spelling stored is the one
   seen first: a stored case's spelling, else the first row of the file that has the case; later
   spellings are read as that one and the import summary says so (``read 'hs-0001' as 'HS-0001'
   3 times``).
7. **Number cells of a workbook** (a spreadsheet drops leading zeros: ``0007`` becomes ``7``): the
   case-ID column is read as text; a number cell is refused when another case ID (stored or in the
   file) is the same number with leading zeros, and otherwise accepted as its digits with a
   warning in the summary. Leading zeros are never added or removed silently.

**Near matches** (a warning, not a refusal; in the summary and in the import's audit entry): a
case ID that is new to the workspace and, compared with a stored ID or another ID of the file,
differs only in punctuation or spaces (``HS-0001``/``HS0001``), only in leading zeros of a number
(``HS-7``/``HS-0007``), only in look-alike characters (letter O for zero, I or l for one), or by
one letter (inserted, deleted or replaced) when the longer ID has three or more letters (a short
prefix such as N or S usually names a site). Edits of digits are not counted: codes are numbered
in sequence, so ``HS-0001`` and ``HS-0002`` are different people. Checking is linear in the number
of IDs (a dictionary of each ID's "skeleton" and of the skeleton with one letter deleted), so
100,000 cases take a fraction of a second.
"""

from __future__ import annotations

import re
import string
import unicodedata

from .reader import NUMBER_CELL_MARK

#: Near matches described in messages and the audit entry (all are counted).
NEAR_MATCHES_LISTED = 20

_SPACES = re.compile(r"\s+")
_NOT_ALNUM = re.compile(r"[\W_]+")
_LEADING_ZEROS = re.compile(r"(?<![0-9])0+(?=[0-9])")
_LOOK_ALIKE = str.maketrans({"o": "0", "i": "1", "l": "1"})
_DROP_DIGITS = str.maketrans({c: None for c in string.digits})
_ASCII_SKELETON = str.maketrans({**{c: None for c in string.punctuation + string.whitespace},
                                 "o": "0", "i": "1", "l": "1"})


def normalise_case_id(text: str) -> tuple[str, str | None]:
    """The case ID as stored (rules 1-5 of the module docstring) and why it is refused, or None.

    Parameters
    ----------
    text : str
        The ID as typed or read from a cell.

    Returns
    -------
    (str, str or None)
        The normalised ID ('' when refused) and the reason for refusing it.
    """
    return _normalise_code(text, "case ID", "HS-0001")


def normalise_coordinator_code(text: str) -> tuple[str, str | None]:
    """A coordinator code as stored and why it is refused, or None: rules 1-5 of the module docstring,
    exactly as for case IDs. Letter case is kept as first seen and ignored when matching (rule 6),
    so ``c1`` typed or imported later is read as a stored ``C1``."""
    return _normalise_code(text, "coordinator code", "C1")


def _normalise_code(text: str, what: str, example: str) -> tuple[str, str | None]:
    text = str(text)
    if text.isascii():
        if not text.isprintable():
            return "", f"expected a {what} without control characters (tab, line break, ...)"
        value = text.strip()
        if "  " in value:
            value = _SPACES.sub(" ", value)
    else:
        if any(unicodedata.category(c) == "Cc" for c in text):
            return "", f"expected a {what} without control characters (tab, line break, ...)"
        kept = "".join(c for c in text if unicodedata.category(c) != "Cf")
        kept = unicodedata.normalize("NFKC", kept)
        kept = "".join("-" if unicodedata.category(c) == "Pd" or c == "\u2212" else c for c in kept)
        value = _SPACES.sub(" ", kept).strip()
        if any(unicodedata.category(c) in ("Cc", "Cf") for c in value):
            return "", f"expected a {what} without control or invisible characters"
    if value == "":
        return "", f"nothing is left of the {what} once invisible characters and spaces are removed; " \
                   f"expected a code such as {example}"
    return value, None


def search_key(text: str) -> str:
    """``text`` as compared by a case-ID search (substring): rules 2-5 without refusing anything
    (control characters are dropped), casefolded, so ``ｈｓ‐０００１`` finds ``HS-0001``."""
    text = str(text)
    if text.isascii() and text.isprintable():
        return text.strip().casefold()
    value, why = normalise_case_id("".join(c for c in text if unicodedata.category(c) != "Cc"))
    return "" if why is not None else value.casefold()


def match_case_id(typed: str, stored, where: str) -> str:
    """The stored spelling of the case ``typed`` names (rules 1-6); InputError otherwise.

    The one rule for a case ID a person types (a command-line argument, the window's ``--case``):
    normalised like an imported cell and matched without regard to letter case. Storage calls it
    through :meth:`caseview.storage.Workspace.find_case`; code holding scores calls it directly.

    Parameters
    ----------
    typed : str
        The ID as typed.
    stored : iterable of str
        The case IDs it may name, as stored.
    where : str
        Where they are, for the message ("team.cvw").

    Raises
    ------
    InputError
        The ID cannot be normalised (one line saying why); no such case (with ``did you mean
        'HS-0007'?`` when a stored ID nearly matches, see the module docstring); or it matches
        several stored IDs that differ only in letter case.
    """
    from ..errors import InputError

    value, why = normalise_case_id(typed)
    if why is not None:
        raise InputError(f"case ID {str(typed)!r}: {why}")
    codes = [str(c) for c in stored]
    if value in codes:
        return value
    key = value.casefold()
    same = [c for c in codes if c.casefold() == key]
    if len(same) == 1:
        return same[0]
    if same:
        raise InputError(f"case ID {str(typed)!r} matches {len(same)} cases in {where} that differ only in "
                         f"letter case ({', '.join(repr(c) for c in same[:5])}); type one of them exactly")
    near = CaseIdBook(codes).near_match(value)
    hint = f"; did you mean {near[0]!r}? ({near[1]})" if near else ""
    raise InputError(f"no case {str(typed)!r} in {where}{hint}")


def match_coordinator_code(typed: str, known, where: str) -> str:
    """The stored spelling of the coordinator ``typed`` names (normalised, letter case ignored);
    InputError naming the known coordinators otherwise (the ``--coordinator`` filters).

    Parameters
    ----------
    typed : str
    known : iterable of str
        Coordinator codes as stored ('' entries are ignored).
    where : str
        What was searched, for the message.
    """
    from ..errors import InputError

    value, why = normalise_coordinator_code(typed)
    if why is not None:
        raise InputError(f"coordinator {str(typed)!r}: {why}")
    codes = sorted({str(c) for c in known} - {""})
    if value in codes:
        return value
    same = [c for c in codes if c.casefold() == value.casefold()]
    if len(same) == 1:
        return same[0]
    if same:
        raise InputError(f"coordinator {str(typed)!r} matches {', '.join(same)}, which differ only in letter "
                         "case; type one of them exactly")
    listed = ", ".join(codes[:20]) + (f" and {len(codes) - 20} more" if len(codes) > 20 else "")
    raise InputError(f"no coordinator {str(typed)!r} in {where} (coordinators: "
                     f"{listed or 'none recorded'})")


def _skeleton(key: str) -> str:
    """Letters and digits only, look-alikes unified, leading zeros of numbers dropped (key is casefolded)."""
    if key.isascii():
        text = key.translate(_ASCII_SKELETON)
    else:
        text = _NOT_ALNUM.sub("", key).translate(_LOOK_ALIKE)
    return _LEADING_ZEROS.sub("", text) if "0" in text else text


def _letter_deletions(skeleton: str) -> set:
    """The skeleton with one letter deleted, for skeletons of at least three letters."""
    if len(skeleton.translate(_DROP_DIGITS)) < 3:
        return set()
    return {skeleton[:i] + skeleton[i + 1:] for i, c in enumerate(skeleton) if not c.isdigit()}


def _how_near(a: str, b: str) -> str:
    fa, fb = a.casefold(), b.casefold()
    if _NOT_ALNUM.sub("", fa) == _NOT_ALNUM.sub("", fb):
        return "differs only in punctuation or spaces"
    if _LEADING_ZEROS.sub("", _NOT_ALNUM.sub("", fa)) == _LEADING_ZEROS.sub("", _NOT_ALNUM.sub("", fb)):
        return "differs only in leading zeros"
    if _skeleton(fa) == _skeleton(fb):
        return "differs only in look-alike characters (O and 0, I or l and 1)"
    return "differs by one letter"


class CaseIdBook:
    """Spellings of the case IDs of one import: stored ones first, then the file's in row order.

    Parameters
    ----------
    stored : iterable of str
        The workspace's case IDs as stored.
    """

    def __init__(self, stored=()):
        self.spelling: dict = {}          # casefolded ID -> spelling kept
        self.stored: set = set()          # casefolded stored IDs
        self._skeletons: dict = {}        # skeleton -> spelling
        self._deletions: dict = {}        # skeleton with one letter deleted -> spelling
        self.respelled: dict = {}         # (as read, kept) -> rows
        self.normalised = 0               # rows whose ID changed under rules 2-5
        self.near: list = []              # (new, existing, how, line)
        self.near_count = 0
        self.number_cells: dict = {}      # spelling -> first line, IDs read from workbook number cells
        for code in stored:
            key = str(code).casefold()
            if key not in self.spelling:
                self.spelling[key] = str(code)
                self.stored.add(key)
                self._index(str(code), key, check=False, line=0)

    def _nearest(self, skeleton: str, deletions: set):
        other = self._skeletons.get(skeleton)
        if other is None:
            other = self._deletions.get(skeleton)
        if other is None:
            for variant in deletions:
                other = self._skeletons.get(variant) or self._deletions.get(variant)
                if other is not None:
                    break
        return other

    def near_match(self, value: str):
        """(spelling, how) of a known ID that ``value`` (normalised) nearly matches, or None."""
        key = value.casefold()
        skeleton = _skeleton(key)
        other = self._nearest(skeleton, _letter_deletions(skeleton))
        if other is None or other.casefold() == key:
            return None
        return other, _how_near(value, other)

    def _index(self, value: str, key: str, check: bool, line: int) -> None:
        skeleton = _skeleton(key)
        deletions = _letter_deletions(skeleton)
        if check:
            other = self._nearest(skeleton, deletions)
            if other is not None and other.casefold() != key:
                self.near_count += 1
                if len(self.near) < NEAR_MATCHES_LISTED:
                    self.near.append((value, other, _how_near(value, other), line))
        self._skeletons.setdefault(skeleton, value)
        for variant in deletions:
            self._deletions.setdefault(variant, value)

    def resolve(self, raw: str, rows: int, line: int) -> tuple[str, str | None]:
        """The spelling to store for a distinct cell text seen on ``rows`` rows from ``line`` on.

        Returns the spelling ('' when refused) and the reason for refusing it, or None.
        """
        number_cell = raw.startswith(NUMBER_CELL_MARK)
        value, why = normalise_case_id(raw[1:] if number_cell else raw)
        if why is not None:
            return "", why
        if value != (raw[1:] if number_cell else raw).strip():
            self.normalised += rows
        key = value.casefold()
        kept = self.spelling.get(key)
        if kept is None:
            self.spelling[key] = kept = value
            self._index(value, key, check=True, line=line)
        if kept != value:
            self.respelled[(value, kept)] = self.respelled.get((value, kept), 0) + rows
        if number_cell:
            self.number_cells.setdefault(kept, line)
        return kept, None

    def number_cell_problems(self) -> list:
        """(line, message) for workbook number cells that may have lost leading zeros of another ID."""
        out = []
        if not self.number_cells:
            return out
        zero_free = {}
        for key, spelling in self.spelling.items():
            zero_free.setdefault(_LEADING_ZEROS.sub("", key), []).append(spelling)
        for value, line in self.number_cells.items():
            others = [o for o in zero_free.get(_LEADING_ZEROS.sub("", value.casefold()), ())
                      if o.casefold() != value.casefold()]
            other = others[0] if others else None
            if other is not None and other.casefold() != value.casefold():
                out.append((line, f"a number cell {value!r} where case {other!r} is the same number with leading "
                                  "zeros: the spreadsheet may have dropped them; format the case_id column as Text "
                                  "and retype the IDs, or save the sheet as CSV"))
        return out

    def notes(self, label: str) -> list:
        """Summary lines about what was read differently from how it was written."""
        out = []
        if self.normalised:
            out.append(f"{label}: {self.normalised:,} case ID cells had invisible characters, full-width or "
                       "look-alike dashes or extra spaces; they were stored in plain form")
        if self.respelled:
            shown = sorted(self.respelled.items(), key=lambda item: -item[1])[:3]
            examples = "; ".join(f"read {a!r} as {b!r} {n:,} time{'s' if n != 1 else ''}" for (a, b), n in shown)
            more = len(self.respelled) - len(shown)
            out.append(f"{label}: case IDs are matched without regard to letter case: {examples}"
                       + (f" (and {more:,} more spellings)" if more > 0 else ""))
        good_numbers = len(self.number_cells)
        if good_numbers:
            example = next(iter(self.number_cells))
            out.append(f"{label}: {good_numbers:,} case IDs were number cells in the workbook (e.g. {example!r}) and "
                       "were read as text; if your IDs have leading zeros, format the column as Text")
        if self.near_count:
            listed = "; ".join(f"{new!r} {how} from {old!r}" for new, old, how, _ in self.near[:5])
            more = self.near_count - min(5, len(self.near))
            out.append(f"{label}: {self.near_count:,} new case ID{'s' if self.near_count != 1 else ''} nearly "
                       f"match{'' if self.near_count != 1 else 'es'} another ID - check they are not the same "
                       f"person: {listed}" + (f" (and {more:,} more)" if more > 0 else ""))
        return out

    def audit_details(self) -> dict:
        """What the audit entry keeps about near matches (the first :data:`NEAR_MATCHES_LISTED`)."""
        if not self.near_count:
            return {}
        return {"near_matches": self.near_count,
                "near_match_examples": [{"new": new, "existing": old, "how": how} for new, old, how, _ in self.near]}


class CoordinatorBook:
    """Spellings of coordinator codes of one import: stored ones first, then the file's in row order.

    Coordinator codes are normalised like case IDs (:func:`normalise_coordinator_code`) and matched
    without regard to letter case; the spelling kept is the one seen first (stored, else the file's
    first), so ``c1`` and ``Ｃ１`` in a file are stored as a stored ``C1``.

    Parameters
    ----------
    stored : iterable of str
        The workspace's coordinator codes as stored.
    """

    def __init__(self, stored=()):
        self.spelling: dict = {}
        for code in stored:
            self.spelling.setdefault(str(code).casefold(), str(code))
        self.respelled: dict = {}         # (as read, kept) -> rows

    def resolve(self, raw: str, rows: int) -> tuple[str, str | None]:
        """The spelling to store for a distinct cell text seen on ``rows`` rows, and why it is refused."""
        value, why = normalise_coordinator_code(raw)
        if why is not None:
            return "", why
        kept = self.spelling.setdefault(value.casefold(), value)
        if kept != raw.strip():
            self.respelled[(raw.strip(), kept)] = self.respelled.get((raw.strip(), kept), 0) + rows
        return kept, None

    def notes(self, label: str) -> list:
        """A summary line about coordinator codes read as another spelling."""
        if not self.respelled:
            return []
        shown = sorted(self.respelled.items(), key=lambda item: -item[1])[:3]
        examples = "; ".join(f"read {a!r} as {b!r} {n:,} time{'s' if n != 1 else ''}" for (a, b), n in shown)
        more = len(self.respelled) - len(shown)
        return [f"{label}: coordinator codes are normalised like case IDs and matched without regard to letter "
                f"case: {examples}" + (f" (and {more:,} more spellings)" if more > 0 else "")]

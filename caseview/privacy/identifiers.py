"""The identifier screen: refuse to store values that look like direct identifiers.

caseview only holds de-identified timelines. The importer calls this screen on every column
header and on every distinct value of the text columns, and refuses a file that contains
something that looks like one of the direct identifiers listed by the HIPAA Safe Harbor method
(45 CFR 164.514(b)(2)(i), categories (A)-(R); the category wording used in messages is recalled
from memory, check it against the regulation text before quoting it).

Rules (``IdentifierFinding.rule``)
----------------------------------
``email``           an e-mail address (``x@example.org``, also ``x (at) example.org``).
``url``             ``http(s)://``, ``ftp://``, ``www.``, or a bare domain with a common ending.
``ip_address``      an IPv4 dotted quad with every octet <= 255, or a valid IPv6 address.
``device``          a MAC address (device identifiers and serial numbers).
``ssn``             ``123-45-6789``, ``123 45 6789``, ``123.45.6789``; a whole value of 9 bare
                    digits in a case ID, coordinator, covariate or free ("other") column.
``record_number``   a record keyword (MRN, NHS, account, acct, policy, member, passport, licence,
                    serial, plate, ...) followed by >= 5 digits; a payment-card-like 4-4-4-n
                    number; a run of >= 7 digits in a case ID, coordinator, channel or stage
                    column; >= 12 digits anywhere.
``phone``           international (+1 555 123 4567), (555) 123-4567, 555-123-4567 / 555.123.4567,
                    trunk-prefix national numbers (07700 900123, 020 7946 0123), a keyword
                    (tel, fax, mobile, ...) followed by digits, a lone 555-0123, or a bare run
                    of 10-11 digits.
``date_of_birth``   any full date (day, month and year) outside the contact-date column:
                    1948-03-12, 12/03/1948, 12/03/48, 12 March 1948, March 12, 1948, and an
                    8-digit YYYYMMDD number in a covariate or case-ID column. Only the contact
                    ``date`` column may hold full dates.
``street_address``  a house number followed by up to four words and a street type (Street, St,
                    Road, Avenue, Lane, Drive, Close, Way, Court, Boulevard, ...); PO Box n;
                    Flat/Apt/Unit n followed by a word.
``postcode``        a UK-style postcode with its space (``AB1 2CD``) or a US ZIP+4.
``person_name``     in a case-ID or coordinator column (codes contain digits): two or more
                    alphabetic words and no digit (``Mary Smith``, ``Smith, John``, ``J. Smith``,
                    ``MARY SMITH``), or ``MarySmith``; in a column whose header names a person
                    (``client_name``...): any value with letters and no digit; anywhere: a
                    title and a capitalised word (``Mrs Smith``).
``age_over_89``     a number from 90 to 150 in a column whose header is an age.
``name_column``     (headers only) a header that announces a direct identifier: name, surname,
                    email, phone, ssn, address, postcode, dob, mrn, account, licence, vehicle,
                    device serial, url, ip, photo, biometric, ... Case, spaces, hyphens,
                    underscores and camelCase are normalised; ``stage_name``, ``channel_name``
                    and ``mobility`` are not flagged.

Speed: :func:`screen_values` first tries a cheap whole-value pattern per role (pseudonymous
codes such as HS-0001 or C3, small numbers, category words and stage names, ISO dates in the
date column) and runs the full rules only on what is left. Every pattern bounds its
repetitions, so a huge value is screened in linear time.

What the screen cannot catch
----------------------------
(The same as :data:`SCREEN_LIMITS`.) It is a pattern screen and cannot prove a file is
de-identified. It misses: a name that looks like a code or is a single word (a case ID "Smith" or
"JS1", or "mary_smith"); names or identifiers inside free text in a category column (it looks
for names by shape only in case-ID, coordinator and name columns, and for a title such as "Mrs
Smith" anywhere); formats it does not know (rare national phone or record formats, addresses in
languages other than English or without a house number and a street type, other countries'
postcodes, bare 5-digit ZIP codes, month-and-year dates); obfuscated values ("mary dot smith at
..."); dates that were shifted or partly removed; a birth date typed into the contact-date
column; vehicle plates, device serials, photographs and biometric data stored as opaque values;
pseudonymous codes that can be reversed (a case ID built from a hospital number with fewer than
7 digits). It does not look at quasi-identifiers at all: a rare combination of age band, small
area, living situation and contact dates can still single out a person. Passing the screen is
neither the Safe Harbor method (which also needs no actual knowledge that the rest could identify
someone) nor an expert determination. Some clean values are refused too: a case code starting
with a record keyword and 5 or more digits ("ACC-12345"), a 9-digit covariate, a version string
shaped like a dotted quad ("1.2.3.4").
"""

from __future__ import annotations

import ipaddress
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterable

from . import patterns as p

__all__ = ["IdentifierFinding", "screen_value", "screen_values", "screen_column_name", "mask",
           "SCREEN_LIMITS", "ROLES"]

ROLES = ("case_id", "coordinator", "channel", "covariate", "stage_known", "date", "other")

SCREEN_LIMITS = (
    "The identifier screen looks for the shapes of direct identifiers; it cannot prove a file is "
    "de-identified. It will not notice a name that looks like a code or a single word (a case ID "
    "such as \"Smith\" or \"JS1\"), names or other identifiers written inside free text in a "
    "category column, identifiers in formats it does not know (rare national phone or record "
    "formats, addresses in languages other than English or without a house number and street "
    "type, postcodes of other countries, bare 5-digit ZIP codes), obfuscated values (\"mary dot "
    "smith at ...\", digits spelled out), dates that were shifted or partly removed, a birth date "
    "typed into the contact-date column, vehicle plates, device serials, photographs and "
    "biometric data stored as opaque values, or pseudonymous codes that can be reversed (for "
    "example a case ID built from a hospital number). It does not look at quasi-identifiers at "
    "all: a rare combination of age band, small area, living situation and contact dates can "
    "still single out a person. Passing the screen is not the Safe Harbor method (which also "
    "needs no actual knowledge that the rest could identify someone) and is not an expert "
    "determination; a person responsible for data protection must still check what is imported."
)


@dataclass(frozen=True)
class IdentifierFinding:
    """Why a value (or a column header) looks like a direct identifier.

    Parameters
    ----------
    rule : str
        Short stable id of the rule that fired (``"email"``, ``"phone"``, ... see the module doc).
    description : str
        Plain words: what it looks like and which Safe Harbor category, for an error message.
        Never contains the value itself.
    """

    rule: str
    description: str


_WHAT = {
    "email": "an email address",
    "url": "a web address (URL)",
    "ip_address": "an IP address",
    "device": "a device identifier (MAC address)",
    "ssn": "a social security number",
    "record_number": "a record, account or other identifying number",
    "phone": "a telephone or fax number",
    "date_of_birth": "a full date (a date of birth or another date about a person)",
    "street_address": "a street address",
    "postcode": "a postal code",
    "person_name": "a person's name",
    "age_over_89": "an age over 89",
    "biometric": "a photograph or biometric identifier",
}


def _finding(rule: str) -> IdentifierFinding:
    return _FINDINGS[rule]


_FINDINGS = {
    rule: IdentifierFinding(rule, f"looks like {what} (Safe Harbor category: {p.CATEGORY[rule]})")
    for rule, what in _WHAT.items()
}


# --------------------------------------------------------------------------- column headers
def _header_words(name: str) -> list[str]:
    text = re.sub(r"([a-z0-9])([A-Z])", r"\1_\2", str(name).strip())   # camelCase -> camel_Case
    return [w for w in re.split(r"[^0-9a-z]+", text.lower()) if w]


@lru_cache(maxsize=4096)
def _column_category(name: str) -> str | None:
    words = _header_words(name)
    if not words:
        return None
    joined_pairs = {"_".join(words[i:i + 2]) for i in range(len(words) - 1)}
    squashed = "".join(words)
    for category, vocabulary in p.COLUMN_WORDS.items():
        hits = (set(words) | joined_pairs) & vocabulary
        if category == "person_name" and hits and hits <= {"name", "names"}:
            if set(words) & p.NON_PERSON_NAME_QUALIFIERS:
                hits = set()
        if hits:
            return category
    for category, pieces in p.COLUMN_SUBSTRINGS.items():
        if any(piece in squashed for piece in pieces):
            return category
    return None


def screen_column_name(name: str) -> IdentifierFinding | None:
    """Screen a column header; a finding if the header announces a direct identifier.

    The header itself is not sensitive, so the description names it.
    """
    category = _column_category(str(name))
    if category is None:
        return None
    what = _WHAT[category]
    return IdentifierFinding(
        "name_column",
        f'column name "{name}" announces {what} (Safe Harbor category: {p.CATEGORY[category]})',
    )


def _is_person_name_column(column: str) -> bool:
    return bool(column) and _column_category(column) == "person_name"


def _is_age_column(column: str) -> bool:
    return bool(column) and "age" in _header_words(column)


# --------------------------------------------------------------------------- values
def mask(value: str) -> str:
    """What to show instead of a suspected identifier: its first character and its length.

    Values of 3 characters or fewer show only the length, so the whole value is never echoed.
    """
    text = str(value)
    n = len(text)
    if n == 0:
        return "(empty)"
    plural = "character" if n == 1 else "characters"
    if n <= 3:
        return f"({n} {plural})"
    first = text[0] if text[0].isprintable() and not text[0].isspace() else "?"
    return f"{first}\u2026 ({n} {plural})"


def _valid_ipv6(text: str) -> bool:
    for candidate in p.IPV6_CANDIDATE.finditer(text):
        token = candidate.group(0)
        if token.count(":") < 2 or not any(c.isalnum() for c in token) and token != "::":
            continue
        try:
            ipaddress.IPv6Address(token)
        except ValueError:
            continue
        return True
    return False


def _looks_like_person_name(text: str, name_column: bool) -> bool:
    if any(c.isdigit() for c in text):
        return False
    if name_column:
        return any(c.isalpha() for c in text)
    tokens = [t for t in re.split(r"[\s,.]+", text) if t]
    if len(tokens) >= 2:
        words = [re.sub(r"['\u2019-]", "", t) for t in tokens]
        return all(w.isalpha() for w in words) and any(len(w) >= 2 for w in words)
    return bool(re.fullmatch(r"[A-Z][a-z]+(?:[_.]?[A-Z][a-z]+)+", text))


def _digit_run_rule(text: str, role: str) -> str | None:
    stripped = text.strip()
    if stripped.isdigit() and stripped.isascii():
        n = len(stripped)
        if n == 8 and role in ("covariate", "case_id", "coordinator", "other") \
                and p.COMPACT_DATE_WHOLE.fullmatch(stripped):
            return "date_of_birth"
        if n == 9 and role != "date":
            return "ssn"
    longest = max((len(m) for m in p.DIGIT_RUN.findall(text)), default=0)
    if longest >= 12:
        return "record_number"
    if longest >= 7 and role in ("case_id", "coordinator", "channel", "stage_known"):
        return "record_number"
    return None


def _is_age_over_89(text: str) -> bool:
    try:
        age = float(text)
    except ValueError:
        return False
    return 90 <= age <= 150


def _decimal_number_rule(text: str, integer_part: str, role: str, column: str) -> IdentifierFinding | None:
    """A number with a fraction or an exponent: only a long integer part or an old age counts."""
    if len(integer_part) >= 12 or (len(integer_part) >= 7 and role in ("case_id", "coordinator")):
        return _finding("record_number")
    if column and _is_age_column(column) and _is_age_over_89(text):
        return _finding("age_over_89")
    return None


def _screen(text: str, role: str, column: str, name_column: bool) -> IdentifierFinding | None:
    if not text or text.isspace():
        return None
    has_digit = any(c.isdigit() for c in text) if len(text) < 64 else bool(re.search(r"\d", text))
    if ("@" in text or "(at)" in text or "[at]" in text) and p.EMAIL.search(text):
        return _finding("email")
    if "." in text or ":" in text:
        if p.URL.search(text):
            return _finding("url")
        if has_digit and p.IPV4.search(text):
            return _finding("ip_address")
        if ":" in text and (p.MAC_ADDRESS.search(text)):
            return _finding("device")
        if ":" in text and _valid_ipv6(text):
            return _finding("ip_address")
    if has_digit:
        number = p.DECIMAL_NUMBER_WHOLE.fullmatch(text)
        if number is not None:
            return _decimal_number_rule(text, number.group(1), role, column)
        if p.SSN.search(text):
            return _finding("ssn")
        if p.RECORD_STRONG.search(text) or p.CARD_NUMBER.search(text):
            return _finding("record_number")
        if any(pattern.search(text) for pattern in p.PHONE) or p.PHONE_LOCAL_WHOLE.fullmatch(text):
            return _finding("phone")
        if role != "date" and any(pattern.search(text) for pattern in p.FULL_DATE):
            return _finding("date_of_birth")
        if (p.STREET_ADDRESS.search(text) or p.PO_BOX.search(text) or p.UNIT_ADDRESS.search(text)
                or p.FOREIGN_STREET.search(text)):
            return _finding("street_address")
        if p.UK_POSTCODE.search(text) or p.US_ZIP_PLUS4.search(text):
            return _finding("postcode")
        rule = _digit_run_rule(text, role)
        if rule is not None:
            return _finding(rule)
        if column and _is_age_column(column) and _is_age_over_89(text):
            return _finding("age_over_89")
    if p.NAMED_STREET.search(text):
        return _finding("street_address")
    if p.TITLE_NAME.search(text):
        return _finding("person_name")
    if (role in ("case_id", "coordinator") or name_column) and \
            _looks_like_person_name(text.strip(), name_column):
        return _finding("person_name")
    return None


def _check_role(role: str) -> None:
    if role not in ROLES:
        raise ValueError(f"role must be one of {', '.join(ROLES)}; got {role!r}")


def screen_value(value: str, role: str, column: str = "") -> IdentifierFinding | None:
    """Screen one value; a finding if it looks like a direct identifier, else None.

    Parameters
    ----------
    value : str
        The cell text (other types are converted with ``str``).
    role : str
        What the column holds: one of :data:`ROLES`.
    column : str
        The column header; a header that names a person or an age makes the screen stricter.

    Raises
    ------
    ValueError
        Only for an unknown ``role`` (a programming error, not a user error).
    """
    _check_role(role)
    column = "" if column is None else str(column)
    return _screen(str(value), role, column, _is_person_name_column(column))


_PREFILTER_PARTS = {
    "case_id": (p.CLEAN_CODE_WHOLE.pattern, r"[0-9]{1,6}"),
    "coordinator": (p.CLEAN_CODE_WHOLE.pattern, r"[0-9]{1,6}"),
    "covariate": (p.CLEAN_SMALL_NUMBER_WHOLE.pattern, p.CLEAN_WORDS_WHOLE.pattern),
    "channel": (p.CLEAN_WORDS_WHOLE.pattern, p.CLEAN_SMALL_NUMBER_WHOLE.pattern, p.CLEAN_CODE_WHOLE.pattern),
    "stage_known": (p.CLEAN_WORDS_WHOLE.pattern, p.CLEAN_SMALL_NUMBER_WHOLE.pattern),
    "date": (p.CLEAN_ISO_DATE_WHOLE.pattern, p.CLEAN_SMALL_NUMBER_WHOLE.pattern),
    "other": (p.CLEAN_WORDS_WHOLE.pattern, p.CLEAN_SMALL_NUMBER_WHOLE.pattern, p.CLEAN_CODE_WHOLE.pattern),
}
#: Whole-value patterns per role that are clean under every rule (a pure speed-up).
PREFILTERS = {role: re.compile("|".join(f"(?:{part})" for part in parts))
              for role, parts in _PREFILTER_PARTS.items()}


def screen_values(values: Iterable[str], role: str, column: str = "") -> dict[str, IdentifierFinding]:
    """Screen many (distinct) values of one column; the findings keyed by value.

    Clean values are absent from the result. Common clean shapes for the role are let through
    by one cheap whole-value pattern; only the rest go through every rule.

    Parameters
    ----------
    values : iterable of str
    role : str
        One of :data:`ROLES`.
    column : str
        The column header.

    Returns
    -------
    dict of str to IdentifierFinding
    """
    _check_role(role)
    column = "" if column is None else str(column)
    name_column = _is_person_name_column(column)
    strict = name_column or _is_age_column(column)
    quick_clean = None if strict else PREFILTERS[role].fullmatch
    findings: dict[str, IdentifierFinding] = {}
    for value in values:
        text = value if isinstance(value, str) else str(value)
        if quick_clean is not None and quick_clean(text):
            continue
        finding = _screen(text, role, column, name_column)
        if finding is not None:
            findings[text] = finding
    return findings

"""Compiled patterns and word lists used by :mod:`caseview.privacy.identifiers`.

Kept apart from the screening logic so the rules can be read (and reviewed) as a list. Every
pattern is searched inside a value, not matched against the whole value, unless its name says
``WHOLE``. The Safe Harbor category wording follows 45 CFR 164.514(b)(2)(i)(A)-(R) as recalled
from memory (check against the regulation text before quoting it as a citation).
"""

from __future__ import annotations

import re

# --------------------------------------------------------------------------- Safe Harbor wording
CATEGORY = {
    "person_name": "names",
    "street_address": "street address and other geographic subdivisions smaller than a state",
    "postcode": "postal codes and other geographic subdivisions smaller than a state",
    "date_of_birth": "all elements of dates (except year) directly related to an individual",
    "age_over_89": "ages over 89",
    "phone": "telephone and fax numbers",
    "email": "electronic mail addresses",
    "ssn": "social security numbers",
    "record_number": ("medical record, health plan beneficiary, account, certificate or licence "
                      "numbers, or another unique identifying number"),
    "url": "web universal resource locators (URLs)",
    "ip_address": "internet protocol (IP) address numbers",
    "device": "vehicle and device identifiers and serial numbers",
    "biometric": "biometric identifiers and full-face photographs",
}

# --------------------------------------------------------------------------- fast clean pre-filter
# A value that matches one of these WHOLE is certainly clean for every rule below; the pre-filter
# only saves time and must never let an identifier through (tests/privacy checks that every
# pre-filtered value is also clean under the full rules).
# codes that start like a record keyword (MRN..., ACCT..., TEL...) always take the full rules
_RECORD_LIKE_START = (r"(?i:mrn|nhs|ssn|sin|nino|acc|a/c|dob|tel|ph|fax|mob|cel|chi|hcn|pin|ip|vin|"
                      r"imei|iban|mem|pol|ser|pas|lic|pla|dri|ins|med|ben|cer|hos|pat)")
CLEAN_CODE_WHOLE = re.compile(
    r"(?!" + _RECORD_LIKE_START + r")"
    r"[A-Za-z]{1,12}[-_.]?[0-9]{1,6}(?:[-_.][0-9]{1,6})?[A-Za-z]?"
)
CLEAN_SMALL_NUMBER_WHOLE = re.compile(r"[-+]?(?:[0-9]{1,6}(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][-+]?[0-9]{1,3})?")
# category words and stage names: "normal", "Moved to residential care", "Struggling|Crisis"
_STAGE_WORDS = r"[A-Za-z][a-z]*(?: [a-z]+){0,5}"
CLEAN_WORDS_WHOLE = re.compile(_STAGE_WORDS + r"(?:\|" + _STAGE_WORDS + r"){0,6}")
CLEAN_ISO_DATE_WHOLE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")

# --------------------------------------------------------------------------- value rules
# repetitions are bounded (64 = RFC 5321 local-part limit, 63 = DNS label limit) so that a huge
# value costs linear time, never quadratic backtracking
EMAIL = re.compile(r"[\w.%+'’-]{1,64}\s?(?:@|\(at\)|\[at\])\s?[\w-]{1,63}(?:\.[\w-]{1,63}){0,8}\.[A-Za-z]{2,24}")
URL = re.compile(
    r"(?i:\b(?:https?|ftp|file)://|\bwww\d?\.[\w-]+\.|"
    r"\b[\w-]{1,63}\.(?:com|org|net|gov|edu|info|biz|io|co\.uk|org\.uk|nhs\.uk|ac\.uk)(?:/|\b))"
)
_OCTET = r"(?:25[0-5]|2[0-4][0-9]|1[0-9]{2}|[1-9]?[0-9])"
IPV4 = re.compile(r"(?<![0-9.])" + _OCTET + r"(?:\." + _OCTET + r"){3}(?![0-9]|\.[0-9])")
IPV6_CANDIDATE = re.compile(r"(?<![0-9A-Fa-f:])[0-9A-Fa-f]{0,4}(?::[0-9A-Fa-f]{0,4}){2,7}(?:%\w+)?(?![0-9A-Fa-f:])")

SSN = re.compile(r"(?<![0-9])[0-9]{3}([- .])[0-9]{2}\1[0-9]{4}(?![0-9])")
PHONE = (
    # international: +1 555 123 4567, +44 7700 900123, +44 (0)20 7946 0000, 0044 7700 900123
    # (country codes never start with 0; at least 8 digits in all)
    re.compile(r"(?<![\w+.\-])(?:\+|00)(?=(?:[\s().-]{0,4}[0-9]){8})[1-9][0-9]{0,2}[\s.-]?(?:\(0\)\s?)?\(?[0-9]{1,5}\)?"
               r"(?:[\s.-]?[0-9]{2,5}){1,4}(?![0-9])"),
    # (555) 123-4567, (020) 7946 0000
    re.compile(r"\([0-9]{2,5}\)\s?[0-9]{3,4}[\s.-]?[0-9]{3,4}(?![0-9])"),
    # 555-123-4567, 555.123.4567, 555 123 4567
    re.compile(r"(?<![0-9.\-])[0-9]{3}([.\- ])[0-9]{3}\1[0-9]{4}(?![0-9]|[.\-][0-9])"),
    # North American with a leading 1: 1-555-010-0143, 1 555 010 0143
    re.compile(r"(?<![0-9])1([-. ])[0-9]{3}\1[0-9]{3}\1[0-9]{4}(?![0-9])"),
    # trunk-prefix national numbers: 07700 900123, 020 7946 0123, 0161-496-0000
    re.compile(r"(?<![\w.\-+])0[0-9]{2,4}[\s-]?[0-9]{3,4}[\s-]?[0-9]{3,4}(?![0-9]|[.\-][0-9])"),
    # keyword then digits: "tel 5550123", "fax: 555-0199", "mob. 07700900123"
    re.compile(r"(?i:\b(?:tel|telephone|phone|ph|fax|mob|mobile|cell)(?![a-z])\.?\s{0,3}(?:no\.?|number|#)?\s{0,3}[:#=]?\s{0,3}\+?[0-9][0-9\s().-]{5,25}[0-9])"),
    # bare runs of 10-11 digits
    re.compile(r"(?<![0-9.])[0-9]{10,11}(?![0-9]|\.[0-9])"),
)
PHONE_LOCAL_WHOLE = re.compile(r"\s*[0-9]{3}[-. ][0-9]{4}\s*")  # 555-0123 alone in a cell

_MONTH = (r"(?:jan(?:uary)?|feb(?:ruary)?|mar(?:ch)?|apr(?:il)?|may|june?|july?|aug(?:ust)?|"
          r"sep(?:t(?:ember)?)?|oct(?:ober)?|nov(?:ember)?|dec(?:ember)?)")
_DAY = r"(?:0?[1-9]|[12][0-9]|3[01])"
_MON = r"(?:0?[1-9]|1[0-2])"
_YEAR4 = r"(?:1[89][0-9]{2}|20[0-9]{2})"
FULL_DATE = (
    re.compile(r"(?<![0-9])" + _YEAR4 + r"([-/.])" + _MON + r"\1" + _DAY + r"(?![0-9])"),           # 1948-03-12
    re.compile(r"(?<![0-9.])" + _DAY + r"([-/.])" + _DAY + r"\1" + _YEAR4 + r"(?![0-9])"),           # 12/03/1948
    re.compile(r"(?<![0-9.])" + _DAY + r"([-/])" + _DAY + r"\1[0-9]{2}(?![0-9]|[-/.][0-9])"),       # 12/03/48
    re.compile(r"(?i)(?<![0-9])" + _DAY + r"(?:st|nd|rd|th)?[\s.-]{0,4}(?:of\s{1,3})?" + _MONTH +
               r"\.?[\s.,-]{0,4}(?:" + _YEAR4 + r"|'?[0-9]{2})(?![0-9])"),                               # 12 March 1948
    re.compile(r"(?i)\b" + _MONTH + r"\.?\s+" + _DAY + r"(?:st|nd|rd|th)?,?\s+" + _YEAR4 + r"(?![0-9])"),  # March 12, 1948
)
COMPACT_DATE_WHOLE = re.compile(r"(?:19[0-9]{2}|20[0-9]{2})(?:0[1-9]|1[0-2])(?:0[1-9]|[12][0-9]|3[01])")
BIRTH_WORD = re.compile(r"(?i)\b(?:dob|d\.o\.b\.?|born|birth|birthday)\b")

# Street types. Those that are also everyday words (walk, way, close, court, ...) count only when
# capitalised ("Kestrel Way", "KESTREL WAY"), so "6 m walk" in a mobility column stays clean.
_STREET_TYPE_ANY_CASE = ("street", "st", "road", "rd", "avenue", "ave", "av", "lane", "ln", "drive",
                         "boulevard", "blvd", "terrace", "ter", "terr", "crescent", "cres", "gardens",
                         "gdns", "highway", "hwy", "parkway", "pkwy", "mews", "cl", "ct", "sq", "pl",
                         "trl", "cir")
_STREET_TYPE_CAPITALISED = ("Close", "Way", "Court", "Place", "Grove", "Square", "Row", "Hill",
                            "Walk", "Circle", "Trail", "Rise", "View", "Green", "Parade", "Wynd",
                            "Loop", "Alley", "Plaza", "Dr", "Gr")


def _any_case(word: str) -> str:
    return "".join(f"[{c.upper()}{c}]" for c in word)


_STREET_TYPE = "(?:" + "|".join(
    [_any_case(w) for w in _STREET_TYPE_ANY_CASE]
    + [w for w in _STREET_TYPE_CAPITALISED] + [w.upper() for w in _STREET_TYPE_CAPITALISED]) + ")"
STREET_ADDRESS = re.compile(
    r"(?<![\w.-])[0-9]{1,5}[A-Za-z]?,?\s+(?:[^\W\d_][\w'’.-]{0,30}\s{1,3}){0,4}" + _STREET_TYPE + r"\b"
)
# no house number: "The Old Rectory, Mill Lane" (capitalised, unambiguous street words only)
NAMED_STREET = re.compile(r"(?:^|,\s?)(?:[A-Z][a-z'’]+\s){1,3}(?:Street|Road|Lane|Avenue|Drive|Crescent|"
                          r"Terrace|Gardens|Boulevard|Mews)\b")
# a few street words that come first in other languages: "42 Rue de ...", "7 Calle ..."
FOREIGN_STREET = re.compile(r"(?i)(?<![\w.-])[0-9]{1,5}[a-z]?,?\s+(?:rue|calle|via|avenida|rua|"
                            r"piazza|plaza|place)\s+[^\W\d_]")
PO_BOX = re.compile(r"(?i)\bp\.?\s?o\.?\s*box\s*[0-9]+|\bpost\s+office\s+box\s*[0-9]+")
UNIT_ADDRESS = re.compile(r"\b(?i:flat|apt|apartment|suite|unit)\.?\s?#?\s?[0-9]{1,5}[A-Za-z]?\b,?\s{1,3}(?:[0-9]{1,5}\s)?[A-Z][^\W\d_]+")
UK_POSTCODE = re.compile(r"\b[A-Z]{1,2}[0-9][A-Z0-9]?\s+[0-9][A-Z]{2}\b")
US_ZIP_PLUS4 = re.compile(r"(?<![\w.-])[0-9]{5}-[0-9]{4}(?![0-9-])")

RECORD_STRONG = re.compile(
    r"(?i)\b(?:mrn|nhs|ssn|sin|nino|acct|acc|a/c|hcn|chi|medicare|medicaid|med(?:ical)?\.?\s{1,3}rec(?:ord)?s?|"
    r"health\s+record|hospital\s+(?:no|number)|patient\s+(?:no|number|id)|account|iban|"
    r"policy|member|beneficiary|insurance|passport|licen[cs]e|driver|certificate|"
    r"serial|imei|vin|plate)(?![a-z])\.?\s{0,3}(?:no\.?|number|num|nr|#|id)?\s{0,3}[:#=-]?\s{0,3}"
    r"[A-Z]{0,4}[-\s]?[0-9](?:[\s/-]?[0-9]){4,30}"
)
CARD_NUMBER = re.compile(r"(?<![0-9])[0-9]{4}([ -])[0-9]{4}\1[0-9]{4}\1[0-9]{1,7}(?![0-9])")
DIGIT_RUN = re.compile(r"[0-9]+")
# a number with a fractional part or an exponent ("0.25", "-1.5", "1e-3", "+100000.00"); group 1 is
# the integer part, the only part that can hold an identifier
DECIMAL_NUMBER_WHOLE = re.compile(r"\s*[-+]?([0-9]*)(?:\.[0-9]+(?:[eE][-+]?[0-9]{1,4})?|\.?[eE][-+]?[0-9]{1,4}|\.)\s*")
TITLE_NAME = re.compile(r"\b(?:Mr|Mrs|Ms|Miss|Mx|Dr|Prof|Sir|Dame|Rev)\.?\s{1,3}(?:[A-Z]\.?\s{1,3}){0,3}[A-Z][^\W\d_]+")
MAC_ADDRESS = re.compile(r"(?i)(?<![0-9a-f:-])[0-9a-f]{2}([:-])(?:[0-9a-f]{2}\1){4}[0-9a-f]{2}(?![0-9a-f])")
NAME_SPLIT = re.compile(r"[\s,]+")

# --------------------------------------------------------------------------- column names
# Normalised header (lower case, words joined by "_"): exact words, then squashed substrings.
COLUMN_WORDS = {
    "person_name": {"name", "names", "surname", "forename", "forenames", "firstname", "lastname",
                    "fullname", "initials", "kin", "nok", "alias", "nickname"},
    "email": {"email", "e_mail", "mail", "emails"},
    "phone": {"phone", "telephone", "tel", "mobile", "cell", "fax", "landline"},
    "ssn": {"ssn", "sin", "nino", "social_security", "national_insurance"},
    "street_address": {"address", "addr", "street", "city", "town", "county", "postcode", "zip",
                       "zipcode", "postal", "latitude", "longitude", "lat", "lon", "lng", "gps",
                       "geolocation", "house", "road"},
    "date_of_birth": {"dob", "dod", "birth", "birthday", "birthdate", "born", "death", "admission",
                      "discharge"},
    "record_number": {"mrn", "nhs", "chi", "hcn", "account", "acct", "iban", "medicare", "medicaid",
                      "beneficiary", "policy", "passport", "licence", "license", "certificate",
                      "insurance", "medical_record", "health_record", "record_number", "patient_id",
                      "patient_number", "member_id", "national_id", "id_number"},
    "device": {"vehicle", "vin", "plate", "registration_number", "device", "serial", "imei", "mac"},
    "url": {"url", "website", "homepage", "web", "webpage", "link"},
    "ip_address": {"ip", "ipv4", "ipv6", "ip_address"},
    "biometric": {"photo", "photograph", "picture", "image", "face", "selfie", "portrait",
                  "biometric", "biometrics", "fingerprint", "voiceprint", "retina", "signature"},
}
COLUMN_SUBSTRINGS = {
    "person_name": ("surname", "forename", "firstname", "lastname", "fullname", "givenname",
                    "familyname", "maidenname", "middlename", "clientname", "patientname", "nextofkin"),
    "email": ("email",),
    "phone": ("phone", "telephone", "mobilenumber", "faxnumber", "contactnumber"),
    "ssn": ("socialsecurity", "nationalinsurance"),
    "street_address": ("address", "street", "postcode", "postalcode", "zipcode"),
    "date_of_birth": ("dateofbirth", "birthdate", "birthday", "dateofdeath", "deathdate"),
    "record_number": ("medicalrecord", "healthrecord", "recordnumber", "accountnumber",
                      "creditcard", "cardnumber", "passport", "licence", "license", "nhsnumber",
                      "healthplan", "insurancenumber", "policynumber"),
    "device": ("vehicle", "serialnumber", "deviceid", "deviceserial", "numberplate"),
    "url": ("website", "homepage", "webaddress"),
    "ip_address": ("ipaddress",),
    "biometric": ("photo", "biometric", "fingerprint", "voiceprint", "faceimage"),
}
# "name" qualified by one of these is not a person's name (stage_name, file_name, ...)
NON_PERSON_NAME_QUALIFIERS = {"stage", "channel", "file", "model", "programme", "program",
                              "category", "covariate", "service", "team", "column", "field",
                              "variable", "product", "site", "group", "scheme", "unit", "ward",
                              "organisation", "organization", "device", "host"}

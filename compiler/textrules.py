"""Characters that are not what they look like: the rules every reader applies to text it is given.

- **Noncharacters** (U+FDD0 to U+FDEF and the last two code points of every plane, U+FFFE, U+FFFF,
  U+1FFFE ...) are reserved by Unicode for a program's internal use and never stand for text; the
  workbook's XML cannot carry them. Refused in every text.
- **Format characters** (general category Cf: zero-width space and joiners, the soft hyphen, the
  byte-order mark, word joiners, tags, bidirectional marks) are invisible: two names that look the
  same would differ. Refused in names and other one-line text; citations and notes may hold them
  (scripts that need a zero-width joiner), except the bidirectional overrides, which every text refuses.
- **Look-alike letters**: a word that mixes letters of the Latin, Cyrillic, Greek and similar alphabets
  (a Cyrillic ``о`` inside ``cropland``) looks like one word and is another. Refused in names.

Every message shows such characters by code point and Unicode name (``U+043E CYRILLIC SMALL LETTER
O``), so a person can see what the screen does not show.
"""

from __future__ import annotations

import re
import unicodedata

# General category Cf as of Unicode 15.0 (Egyptian hieroglyph format controls U+13439..U+1343F added in 15.0);
# tests/test_hostile_inputs_more.py checks that every Cf code point of Python's unicodedata is listed.
FORMAT_RANGES = [
    (0x00AD, 0x00AD), (0x0600, 0x0605), (0x061C, 0x061C), (0x06DD, 0x06DD), (0x070F, 0x070F),
    (0x0890, 0x0891), (0x08E2, 0x08E2), (0x180E, 0x180E), (0x200B, 0x200F), (0x202A, 0x202E),
    (0x2060, 0x2064), (0x2066, 0x206F), (0xFEFF, 0xFEFF), (0xFFF9, 0xFFFB), (0x110BD, 0x110BD),
    (0x110CD, 0x110CD), (0x13430, 0x1343F), (0x1BCA0, 0x1BCA3), (0x1D173, 0x1D17A), (0xE0001, 0xE0001),
    (0xE0020, 0xE007F),
]
NONCHARACTER_RANGES = [(0xFDD0, 0xFDEF)] + [(plane * 0x10000 + 0xFFFE, plane * 0x10000 + 0xFFFF)
                                            for plane in range(17)]


def _char_class(ranges) -> str:
    return "".join(chr(a) if a == b else f"{chr(a)}-{chr(b)}" for a, b in ranges)


NONCHARACTER = f"[{_char_class(NONCHARACTER_RANGES)}]"
FORMAT_OR_NONCHARACTER = f"[{_char_class(FORMAT_RANGES + NONCHARACTER_RANGES)}]"
_NONCHARACTER = re.compile(NONCHARACTER)
_FORMAT_OR_NONCHARACTER = re.compile(FORMAT_OR_NONCHARACTER)
# Alphabets whose letters look alike; a word mixing two of them is refused in a name. Other scripts mix on
# purpose (Japanese writes kanji and kana in one word) and are left alone.
LOOKALIKE_SCRIPTS = {"LATIN", "CYRILLIC", "GREEK", "ARMENIAN", "CHEROKEE", "COPTIC", "FULLWIDTH", "MATHEMATICAL"}
SHOWN_CODE_POINTS = 5
# C0 and C1 controls, DEL, bidirectional overrides and isolates, line and paragraph separators; one-line
# text (names) also refuses tab and line breaks.
CONTROLS = "\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069"
MULTILINE_CONTROL = f"[{CONTROLS}]"
LINE_CONTROL = f"[{CONTROLS}\t\n\r]"
MAX_NAME_CHARS = 200  # names and other short text
MAX_NOTE_CHARS = 2000  # citations, notes, descriptions
SHOWN_CHARS = 60  # a longer found value is cut in messages


def code_point(char: str) -> str:
    """``U+043E CYRILLIC SMALL LETTER O`` (a noncharacter or unnamed code point: its category)."""
    name = unicodedata.name(char, "")
    if not name:
        name = "NONCHARACTER" if _NONCHARACTER.match(char) else f"(category {unicodedata.category(char)})"
    return f"U+{ord(char):04X} {name}"


def _script(char: str) -> str:
    if not char.isalpha():
        return ""
    return unicodedata.name(char, "").split(" ", 1)[0]


def has_invisible(text: str, allow_format: bool = False) -> bool:
    """True when ``text`` holds a noncharacter, or (unless ``allow_format``) a format character."""
    return bool((_NONCHARACTER if allow_format else _FORMAT_OR_NONCHARACTER).search(text))


def lookalike_letters(text: str) -> list[tuple[int, str]]:
    """(position, letter) of the letters of a word written in another alphabet than the word's main one.

    A word is a run of letters; its main alphabet is the one most of its letters belong to (on a tie,
    Latin, then the first met). Only the look-alike alphabets of :data:`LOOKALIKE_SCRIPTS` count.
    """
    found = []
    for match in re.finditer(r"[^\W\d_]+", text):
        word = match.group()
        if word.isascii():
            continue
        scripts = [_script(c) for c in word]
        counted = [s for s in scripts if s in LOOKALIKE_SCRIPTS]
        if len(set(counted)) < 2:
            continue
        main = max(dict.fromkeys(counted), key=lambda s: (counted.count(s), s == "LATIN"))
        found += [(match.start() + i, c) for i, (c, s) in enumerate(zip(word, scripts))
                  if s in LOOKALIKE_SCRIPTS and s != main]
    return found


def odd_characters(text: str, letters: list[tuple[int, str]] | None = None) -> str:
    """The characters of ``text`` a person cannot see for what they are, by code point and position.

    Non-ASCII characters that are invisible (not printable: format characters, noncharacters, controls)
    and the ``letters`` given (look-alikes); '' when there are none. Positions count from 1.
    """
    odd = [(i, c) for i, c in enumerate(text) if not c.isascii() and not c.isprintable()]
    odd = sorted(set(odd) | set(letters or []))
    if not odd:
        return ""
    shown = ", ".join(f"{code_point(c)} at position {i + 1}" for i, c in odd[:SHOWN_CODE_POINTS])
    more = len(odd) - SHOWN_CODE_POINTS
    return shown + (f" and {more} more" if more > 0 else "")


def non_ascii_characters(text: str) -> str:
    """Every non-ASCII character of ``text`` by code point and position (for terms, which are ASCII)."""
    odd = [(i, c) for i, c in enumerate(text) if not c.isascii()]
    if not odd:
        return ""
    shown = ", ".join(f"{code_point(c)} at position {i + 1}" for i, c in odd[:SHOWN_CODE_POINTS])
    more = len(odd) - SHOWN_CODE_POINTS
    return shown + (f" and {more} more" if more > 0 else "")


def shorten(text: str, limit: int = SHOWN_CHARS) -> str:
    """A found value as shown in a message: long values cut, with their length."""
    return text if len(text) <= limit else f"{text[:limit]}... ({len(text):,} characters)"


def text_problem(text: str, max_chars: int = MAX_NAME_CHARS, one_line: bool = True,
                 name: bool = True) -> tuple[str, str, str] | None:
    """(message, found, expected) for a text that breaks the rules of the readers, else None.

    The rules of the CSV and workbook readers for one value (a name when ``name``: no format characters,
    no look-alike letters): length, control characters, noncharacters.
    """
    if len(text) > max_chars:
        return (f"longer than {max_chars} characters", shorten(text), f"at most {max_chars} characters")
    if re.search(LINE_CONTROL if one_line else MULTILINE_CONTROL, text):
        return ("holds control characters", shorten(text), "printable text" + (" on one line" if one_line else ""))
    if has_invisible(text, allow_format=not name):
        return (("holds an invisible character or a noncharacter" if name else "holds a noncharacter"),
                f"{shorten(text)} ({odd_characters(text)})",
                "visible text: no format characters (zero-width spaces and joiners, soft hyphens, byte-order marks) "
                "and no noncharacters (U+FFFE, U+FFFF, U+FDD0 to U+FDEF)" if name else
                "text without noncharacters (U+FFFE, U+FFFF, U+FDD0 to U+FDEF)")
    letters = lookalike_letters(text) if name else []
    if letters:
        return ("mixes alphabets within a word (letters that look alike but are others)",
                f"{shorten(text)} ({odd_characters(text, letters)})", "each word in one alphabet: retype the letters named")
    return None

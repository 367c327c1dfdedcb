"""Language tags as media files carry them: ISO 639-1 ("en"), ISO 639-2 ("eng", "fre"/"fra"),
and BCP 47 with a region ("en-GB"), so that "en", "eng" and "en-GB" name one language."""

from __future__ import annotations

import re

# ISO 639-1 code -> its ISO 639-2 codes (bibliographic and terminology forms where they differ),
# for the languages most often found in media libraries (from the ISO 639-2 code list).
_THREE_LETTER = {
    "ar": ("ara",),
    "bg": ("bul",),
    "ca": ("cat",),
    "cs": ("cze", "ces"),
    "cy": ("wel", "cym"),
    "da": ("dan",),
    "de": ("ger", "deu"),
    "el": ("gre", "ell"),
    "en": ("eng",),
    "es": ("spa",),
    "et": ("est",),
    "eu": ("baq", "eus"),
    "fa": ("per", "fas"),
    "fi": ("fin",),
    "fr": ("fre", "fra"),
    "ga": ("gle",),
    "he": ("heb",),
    "hi": ("hin",),
    "hr": ("hrv",),
    "hu": ("hun",),
    "id": ("ind",),
    "is": ("ice", "isl"),
    "it": ("ita",),
    "ja": ("jpn",),
    "ko": ("kor",),
    "lt": ("lit",),
    "lv": ("lav",),
    "nl": ("dut", "nld"),
    "no": ("nor",),
    "nb": ("nob",),
    "pl": ("pol",),
    "pt": ("por",),
    "ro": ("rum", "ron"),
    "ru": ("rus",),
    "sk": ("slo", "slk"),
    "sl": ("slv",),
    "sr": ("srp",),
    "sv": ("swe",),
    "th": ("tha",),
    "tr": ("tur",),
    "uk": ("ukr",),
    "vi": ("vie",),
    "zh": ("chi", "zho"),
}
_TO_TWO = {three: two for two, threes in _THREE_LETTER.items() for three in threes}
_TAG = re.compile(r"^[a-z]{2,3}(-[a-z0-9]{2,8})*$", re.IGNORECASE)


def is_language_tag(text: str) -> bool:
    """Whether `text` looks like a language tag ("en", "eng", "en-GB", "pt-br").

    >>> is_language_tag("en-GB"), is_language_tag("sounds"), is_language_tag("part2")
    (True, False, False)
    """
    return bool(_TAG.match(text))


def base_language(tag: str) -> str:
    """The two-letter code of a tag where one is known, else its primary subtag, lowercase.

    >>> base_language("eng"), base_language("en-GB"), base_language("fra"), base_language("tlh")
    ('en', 'en', 'fr', 'tlh')
    """
    primary = tag.strip().lower().replace("_", "-").split("-", 1)[0]
    return _TO_TWO.get(primary, primary)


def same_language(tag: str, wanted: str) -> bool:
    """Whether a file's tag is the wanted language; a wanted region ("en-GB") must match too.

    >>> same_language("eng", "en"), same_language("en-GB", "en"), same_language("en-US", "en-GB")
    (True, True, False)
    """
    if not tag or not wanted or not is_language_tag(wanted.strip()):
        return False
    if base_language(tag) != base_language(wanted):
        return False
    wanted_rest = wanted.strip().lower().replace("_", "-").split("-", 1)[1:]
    tag_rest = tag.strip().lower().replace("_", "-").split("-", 1)[1:]
    return not wanted_rest or wanted_rest == tag_rest

"""YML-3 asks ``misread`` only of the values ``suspects`` leaves: the texts it passes over must be read
alike by every YAML reader (then ``scalars.misreaders`` finds no misreader, whatever the reader and
the concept's type)."""
from hypothesis import example, given
from hypothesis import strategies as st

from trimtab.common.scalars import YAML_READERS, same_value, typed
from trimtab_rules import _common

TEXT = st.text(st.characters(blacklist_categories=("Cs",)), max_size=12)


def _readings(text: str) -> list:
    return [typed(text, True, None, r) for r in YAML_READERS]


def _passed_over(text: str) -> bool:
    return bool(text) and text[0] not in _common._NOT_TEXT_FIRST and text not in _common._WORDS


@given(TEXT)
@example("on")
@example("null")
@example("~")
@example("/runs/a")
@example("yes please")
@example("Off")
def test_a_text_passed_over_is_text_under_every_reader(text):
    if _passed_over(text):
        assert all(type(v) is str and v == text for v in _readings(text))


@given(TEXT | st.integers(0, 10 ** 40).map(str) | st.sampled_from(["010", "0", "1e5", "1_000", "3e-6", "0x1f",
                                                                      "1:30", "2024-01-02", "1.0", ".5", "off"]))
def test_alike_agrees_with_misreaders(text):
    _common._ALIKE.clear()
    alike = _common._alike(text)
    first, *rest = _readings(text)
    assert alike == all(same_value(first, v) for v in rest)
    if alike or _passed_over(text):
        def read(version):
            return typed(text, True, None, version)
        for kind in ("int", "number", "bool", "str", "any"):
            for reader in (None, *YAML_READERS):
                assert not _common._misreaders(read, reader, kind)


def test_every_word_that_reads_otherwise_is_named():
    # a word of letters that some reader reads as other than its text is one of _WORDS
    for word in ["null", "Null", "NULL", "true", "True", "TRUE", "false", "False", "FALSE", "yes", "Yes", "YES",
                 "no", "No", "NO", "on", "On", "ON", "off", "Off", "OFF"]:
        assert any(v != word or type(v) is not str for v in _readings(word)), word
        assert word in _common._WORDS
    for word in ["y", "n", "Y", "N", "nan", "inf", "Nope", "nULL", "oN", "tRUE", "yES"]:
        assert all(v == word and type(v) is str for v in _readings(word)), word

"""Names of generated C symbols: the C99 rules of identifiers (6.4.2.1), keywords (6.4.1), reserved names (7.1.3)."""

from __future__ import annotations

import pytest

from compensator.errors import ModelError
from compensator.firmware.c_names import MAX_SYMBOL_LENGTH, check_function_name, check_prefix, is_reserved


def _reason(name: str) -> str:
    with pytest.raises(ModelError) as info:
        check_function_name(name)
    assert info.value.key == "name"
    return info.value.reason


def test_valid_names_are_returned_as_given():
    for name in ("bias_dac", "Bias9", "_lower", "x", "a_", "a" * MAX_SYMBOL_LENGTH, "main_loop", "absolute", "int8"):
        assert check_function_name(name) == name
    assert MAX_SYMBOL_LENGTH == 40   # 40 + the longest derived suffix stays within C99's 63 significant characters


def test_not_identifiers_are_refused_with_the_rule():
    rule = ("is not a usable C identifier (letters, digits, underscores, not starting with a digit; at most 40 "
            "characters)")
    for bad in ("9lives", "bias-dac", "bias dac", "", "bias\n", "\u00e9t\u00e9", "a" * 41, "b\u0131as"):
        assert _reason(bad) == f"function name {bad!r} {rule}"
    for bad in (None, 7, b"bias"):
        assert _reason(bad) == f"function name {bad!r} {rule}"


def test_keywords_library_names_and_reserved_names_are_refused():
    # C99 6.4.1 and C11 keywords, first and last of the list, and the common extensions
    for word in ("auto", "while", "int", "_Bool", "_Thread_local", "asm", "bool", "true", "false", "NULL", "main"):
        assert _reason(word) == f"function name {word!r} is not a usable C identifier: it is a C keyword"
    # names of the C99 standard library (7.x), first and last of the list
    for word in ("abort", "abs", "exp", "printf", "uint16_t", "FILE", "EOF", "stdin", "stdout", "stderr"):
        assert _reason(word) == (f"function name {word!r} is not a usable C identifier: it collides with the C "
                                 "standard library")
    # C99 7.1.3: two leading underscores, or an underscore and a capital
    for word in ("__bias", "_Bias", "__", "_Z"):
        assert _reason(word) == (f"function name {word!r} is not a usable C identifier: names starting with two "
                                 "underscores or an underscore and a capital are reserved")


def test_is_reserved():
    assert is_reserved("__x") and is_reserved("_X") and is_reserved("_Xy") and is_reserved("__")
    assert not is_reserved("_x") and not is_reserved("x__") and not is_reserved("a_B") and not is_reserved("_")
    assert not is_reserved("X") and not is_reserved("")
    assert is_reserved("__x") is True and is_reserved("_x") is False


def test_prefixes():
    for prefix in ("", "hut_", "Hut", "_hut", "h9_", "a" * 60):
        assert check_prefix(prefix) == prefix
    for bad in ("9hut", "hut-", "__hut", "_Hut", "hut\n", None, 3):
        with pytest.raises(ModelError) as info:
            check_prefix(bad)
        assert info.value.key == "prefix"
        assert info.value.reason == (f"prefix {bad!r} cannot start a C identifier (letters, digits, underscores, "
                                     "not starting with a digit, two underscores or an underscore and a capital)")

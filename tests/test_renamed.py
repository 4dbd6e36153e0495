"""beltkit._renamed: a renamed keyword keeps its former spelling for a release, with a warning."""

import inspect
import warnings

import pytest

from beltkit._renamed import renamed_keyword


@renamed_keyword("old_name", "new_name")
def _scaled(x, *, new_name=2.0):
    """Return x times new_name."""
    return x * new_name


def test_old_spelling_warns_names_the_new_one_and_gives_the_same_result():
    with pytest.warns(FutureWarning, match=r"_scaled\(\): the keyword old_name= is "
                                           r"deprecated .* use new_name="):
        got = _scaled(3.0, old_name=5.0)
    assert got == _scaled(3.0, new_name=5.0) == 15.0


def test_new_spelling_and_default_do_not_warn():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _scaled(3.0) == 6.0
        assert _scaled(3.0, new_name=1.5) == 4.5


def test_both_spellings_are_a_type_error_like_a_repeated_keyword():
    # Python raises TypeError for a keyword argument given twice (language reference,
    # "Calls"); the two spellings of one argument are refused the same way
    with pytest.raises(TypeError, match="got both new_name= and its former spelling old_name="):
        _scaled(3.0, new_name=1.0, old_name=1.0)


def test_signature_and_docstring_show_the_new_name_only():
    params = inspect.signature(_scaled).parameters
    assert list(params) == ["x", "new_name"]
    assert _scaled.__doc__ == "Return x times new_name."


def test_the_warning_points_at_the_caller():
    with pytest.warns(FutureWarning) as record:
        _scaled(1.0, old_name=1.0)
    assert record[0].filename == __file__

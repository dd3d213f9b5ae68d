"""The top-level API names resolve to the documented objects."""

import refdb


def test_every_export_resolves():
    for name in refdb.__all__:
        assert getattr(refdb, name) is not None, name


def test_unknown_name():
    import pytest

    with pytest.raises(AttributeError):
        refdb.no_such_thing  # noqa: B018

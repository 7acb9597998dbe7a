"""The error hierarchy: every lakeloss error is also the built-in kind callers expect."""

import pytest

from lakeloss import errors


@pytest.mark.parametrize(
    ("cls", "builtin"),
    [
        (errors.ConfigError, ValueError),
        (errors.ParameterRangeError, ValueError),
        (errors.UnknownMethodError, KeyError),
        (errors.MissingInputError, ValueError),
        (errors.InputDataError, OSError),
        (errors.UnitsError, OSError),
        (errors.TimeAxisError, OSError),
        (errors.GeometryError, ValueError),
        (errors.CRSError, ValueError),
        (errors.GridError, ValueError),
        (errors.OutputError, OSError),
    ],
)
def test_errors_are_lakeloss_and_builtin(cls, builtin):
    err = cls("something is wrong; do this to fix it")
    assert isinstance(err, errors.LakelossError)
    assert isinstance(err, builtin)


def test_unknown_method_message_is_not_quoted():
    # KeyError's str() would wrap the message in quotes; the CLI prints str(err).
    err = errors.UnknownMethodError("unknown method 'penmann'; valid: penman_open_water")
    assert str(err) == "unknown method 'penmann'; valid: penman_open_water"

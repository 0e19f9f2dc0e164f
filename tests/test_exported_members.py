"""The public API is a deliberate, locked list (the habit of httpx's test of the same name).

Adding or removing a name from ``advisor.__all__`` is an API change: update this list, the
CHANGELOG and the README in the same commit.
"""

from __future__ import annotations

import importlib.metadata

import advisor

#: The documented entry points: the audit, its result and config, the report writers, the
#: rules loader and the error family.
DOCUMENTED = {
    "AdvisorError",
    "AuditConfig",
    "AuditResult",
    "ConfigError",
    "HistoryError",
    "InsufficientDataError",
    "LogFormatError",
    "OutputError",
    "RulesError",
    "SCHEMA_VERSION",
    "__version__",
    "audit",
    "load_config",
    "load_rules",
    "to_json",
    "write_reports",
}


def test_all_is_sorted():
    """``advisor.__all__`` is kept in sorted order, so additions show up in review."""
    assert advisor.__all__ == sorted(advisor.__all__)


def test_all_equals_the_documented_set():
    """Exactly the documented names are public: none missing, none added by accident."""
    assert set(advisor.__all__) == DOCUMENTED
    assert len(advisor.__all__) == len(DOCUMENTED)  # no name listed twice


def test_every_public_name_is_importable():
    """Every name in ``__all__`` exists on the package (``from advisor import *`` works)."""
    namespace: dict = {}
    exec("from advisor import *", namespace)  # noqa: S102 - the import form users write
    for name in advisor.__all__:
        assert hasattr(advisor, name), name
        assert name in namespace, name


def test_public_functions_and_classes_are_defined_inside_the_package():
    """Each exported callable comes from an ``advisor`` module, not a re-exported dependency."""
    for name in advisor.__all__:
        member = getattr(advisor, name)
        if callable(member):
            assert member.__module__.split(".")[0] == "advisor", (name, member.__module__)


def test_error_classes_form_one_family_with_builtin_bases():
    """Every exported error is an AdvisorError; input and config errors are also ValueErrors."""
    errors = [getattr(advisor, n) for n in advisor.__all__ if n.endswith("Error")]
    assert all(issubclass(e, advisor.AdvisorError) for e in errors)
    assert issubclass(advisor.LogFormatError, ValueError)
    assert issubclass(advisor.ConfigError, ValueError)
    assert issubclass(advisor.OutputError, OSError)


def test_version_matches_the_installed_package_metadata():
    """``advisor.__version__`` is the version pip installed (setup.cfg reads it from here)."""
    assert advisor.__version__ == importlib.metadata.version("advisor")

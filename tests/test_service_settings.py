"""Settings from PROTOLYTE_* environment variables, and the package's public surface."""

from __future__ import annotations

import pytest

from service.settings import Settings, SettingsError


def test_defaults() -> None:
    s = Settings.from_env({})
    assert (s.host, s.port, s.workers) == ("127.0.0.1", 8000, 1)
    assert s.batch_max_items == 10_000 and s.body_limit_bytes == 16 * 1024 * 1024
    assert s.api_key is None and s.cors_origins == () and s.log_level == "INFO"


def test_environment_overrides() -> None:
    s = Settings.from_env(
        {
            "PROTOLYTE_HOST": "0.0.0.0",
            "PROTOLYTE_PORT": "9100",
            "PROTOLYTE_WORKERS": "4",
            "PROTOLYTE_BATCH_MAX_ITEMS": "500",
            "PROTOLYTE_BODY_LIMIT_BYTES": "1048576",
            "PROTOLYTE_LOG_LEVEL": "debug",
            "PROTOLYTE_API_KEY": "s3cret",
            "PROTOLYTE_CORS_ORIGINS": "https://hmi.example, https://ops.example",
            "PROTOLYTE_SOLVE_TIME_BUDGET_S": "2.5",
        }
    )
    assert (s.host, s.port, s.workers, s.batch_max_items, s.body_limit_bytes) == ("0.0.0.0", 9100, 4, 500, 1048576)
    assert s.log_level == "DEBUG" and s.api_key == "s3cret" and s.solve_time_budget_s == 2.5
    assert s.cors_origins == ("https://hmi.example", "https://ops.example")
    assert "s3cret" not in repr(s)


@pytest.mark.parametrize(
    ("name", "value"),
    [
        ("PORT", "eighty"),
        ("PORT", "70000"),
        ("WORKERS", "0"),
        ("BATCH_MAX_ITEMS", "-1"),
        ("LOG_LEVEL", "chatty"),
        ("SOLVE_TIME_BUDGET_S", "nan"),
        ("SOLVE_TIME_BUDGET_S", "inf"),
    ],
)
def test_bad_values_are_refused_with_the_variable_name(name: str, value: str) -> None:
    with pytest.raises(SettingsError):
        Settings.from_env({"PROTOLYTE_" + name: value})


def test_public_surface_is_pinned() -> None:
    import service.app
    import service.problems
    import service.schemas

    assert service.app.__all__ == ["create_app", "app"]
    assert {"Problem", "FieldError", "ProblemError", "install_problem_handlers"} <= set(service.problems.__all__)
    assert {"Stream", "BatchRequest", "EquilibriumResponse", "BatchResponse"} <= set(service.schemas.__all__)
    for module in (service.app, service.problems, service.schemas):
        for name in module.__all__:
            assert hasattr(module, name), (module.__name__, name)

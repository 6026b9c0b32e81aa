"""taprig: the host side of bench airflow rigs.

Layers (imports point down only, see docs/architecture.md):
entry points (cli, web, report, bench) → runtime → link, session → sim → reduce → rig → protocol, physics.
"""

__version__ = "0.1.0"


def __getattr__(name: str):
    """``taprig.open_session`` without importing pandas and pyarrow at ``import taprig`` (loaded on first use)."""
    if name == "open_session":
        from importlib import import_module

        return import_module("taprig.session.api").open_session
    raise AttributeError(f"module 'taprig' has no attribute {name!r}")

"""taprig: the host side of bench airflow rigs.

Layers (imports point down only, see docs/architecture.md):
entry points (cli, web, report, bench) → runtime → link, session → sim → reduce → rig → protocol, physics.
"""

__version__ = "0.1.0"

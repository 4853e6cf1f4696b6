"""fogwatch: an unattended per-site fog and freezing-fog watcher.

The package is laid out as a one-way pipeline (see DEVELOPERS.md):
sources → observations → features → rules/assess → lifecycle → outbox → channels.
Heavy libraries (pandas, matplotlib, pint) are imported inside the functions that
need them so that ``fogwatch --help`` stays fast.
"""

__version__ = "0.1.0"
__all__ = ["__version__"]

"""The web workspace (``fieldplan serve``): plan folders in a browser, over the same library as the CLI.

:func:`fieldplan.web.app.create_app` builds the ASGI application. Every page and
API call that changes a plan calls the same library functions as the matching
``fieldplan`` subcommand, so a plan folder is the same whichever way it was made.
"""

from __future__ import annotations

__all__ = ["create_app"]


def create_app(*args, **kwargs):
    """Build the workspace application (see :func:`fieldplan.web.app.create_app`)."""
    from fieldplan.web.app import create_app as _create

    return _create(*args, **kwargs)

"""``fieldplan serve``: the web workspace over a folder of plan folders."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import echo_err, handle_errors

__all__ = ["register", "serve", "workspace_url"]


def workspace_url(host: str, port: int, token: str | None, *, https: bool = False) -> str:
    """The address to open: ``http(s)://HOST:PORT/`` plus ``?token=`` when a token is needed."""
    shown = f"[{host}]" if ":" in host and not host.startswith("[") else host
    if shown in ("0.0.0.0", "[::]"):
        import socket

        shown = socket.gethostname()
    scheme = "https" if https else "http"
    return f"{scheme}://{shown}:{port}/" + (f"?token={token}" if token else "")


@handle_errors
def serve(
    workspace: Annotated[
        Path, typer.Argument(help="Folder of plan folders (made by 'fieldplan plan --out WORKSPACE/NAME').")
    ] = Path("."),
    host: Annotated[
        str,
        typer.Option(
            "--host", help="Address to listen on. Anything but 127.0.0.1/localhost/::1 requires a token."
        ),
    ] = "127.0.0.1",
    port: Annotated[int, typer.Option("--port", min=1, max=65535, help="Port to listen on.")] = 8750,
    token: Annotated[
        str | None,
        typer.Option(
            "--token",
            help="Access token every request must carry (generated and printed when listening beyond "
            "this machine and none is given).",
        ),
    ] = None,
    max_upload_mb: Annotated[
        float, typer.Option("--max-upload-mb", min=0.001, help="Largest upload accepted, in megabytes.")
    ] = 50.0,
    tls_cert: Annotated[
        Path | None,
        typer.Option(
            "--tls-cert",
            help="Certificate file (PEM) to serve over HTTPS, with --tls-key. Phones give a page their "
            "position and offline storage only over HTTPS (or on this machine).",
        ),
    ] = None,
    tls_key: Annotated[
        Path | None, typer.Option("--tls-key", help="Private key file (PEM) of --tls-cert.")
    ] = None,
) -> None:
    """Serve a workspace of plan folders in the browser: plan, assign crews, bring results back.

    Listens on 127.0.0.1 unless --host says otherwise; on any other address every
    request needs the access token printed with the URL.

    Example: fieldplan serve demo_plots/output
    """
    import ipaddress

    from fieldplan.errors import OptionError
    from fieldplan.web.security import is_loopback_host, new_token

    if workspace.exists() and not workspace.is_dir():
        raise OptionError(f"{workspace}: is a file; give the folder that holds the plan folders")
    public = not is_loopback_host(host)
    if public:
        try:
            ipaddress.ip_address(host.strip("[]"))
        except ValueError:
            raise OptionError(
                f"--host {host!r} is not an IP address; give e.g. 127.0.0.1 or 0.0.0.0"
            ) from None
        if not token:
            token = new_token()
    if (tls_cert is None) != (tls_key is None):
        raise OptionError("--tls-cert and --tls-key go together: give both files, or neither")
    for option, path in (("--tls-cert", tls_cert), ("--tls-key", tls_key)):
        if path is not None and not path.is_file():
            raise OptionError(f"{option} {path}: no such file")
    if token is not None and len(token) < 16:
        raise OptionError("--token must be at least 16 characters (or leave it out to get a generated one)")

    try:
        import fastapi  # noqa: F401
        import uvicorn
    except ImportError:
        raise OptionError(
            "the web workspace needs its extra packages: pip install 'fieldplan[web]'"
        ) from None

    from fieldplan.web.app import create_app

    app = create_app(workspace, token=token, public=public, max_upload_mb=max_upload_mb)
    url = workspace_url(host, port, token, https=tls_cert is not None)
    typer.echo(f"fieldplan workspace {workspace.resolve()}")
    typer.echo(f"Open {url}")
    if public:
        echo_err(
            "note: listening beyond this machine; anyone with the address above (token included) can change "
            "these plans. Use it on a trusted network and share the link only with the team."
        )
    typer.echo("Press Ctrl+C to stop.")
    tls = {"ssl_certfile": str(tls_cert), "ssl_keyfile": str(tls_key)} if tls_cert is not None else {}
    uvicorn.run(app, host=host.strip("[]"), port=port, log_level="warning", server_header=False, **tls)


def register(app: typer.Typer) -> None:
    app.command("serve")(serve)

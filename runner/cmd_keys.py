"""``echoreo keys FOLDER``: generate CURVE key pairs for non-loopback ZeroMQ links."""

from __future__ import annotations

import argparse

from rich.console import Console

__all__ = ["add_arguments", "run"]


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Arguments of ``echoreo keys``."""
    parser.add_argument("folder", help="folder to write the keys into (created)")
    parser.add_argument("--client", action="append", default=None, metavar="NAME",
                        help="client key pair to create and authorize (repeatable; "
                             "default: one called 'client')")
    parser.add_argument("--overwrite", action="store_true", help="replace existing keys")


def run(args: argparse.Namespace, console: Console) -> int:
    """Write the keys and say where each file must go."""
    from echoreo.adapters.security import generate_keys

    clients = tuple(args.client or ["client"])
    files = generate_keys(args.folder, clients, overwrite=args.overwrite)
    for f in files:
        console.print(f"wrote {f}")
    console.print(f"server side (bridge/publisher): --keys {args.folder} needs server.key, "
                  "server.key_secret and authorized/; client side (session host): "
                  f"server.key and <client>.key[_secret]. Keep *.key_secret private.")
    return 0

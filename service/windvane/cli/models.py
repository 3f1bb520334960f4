"""``windvane publish``, ``activate``, ``rollback`` and ``models``: the data scientist's commands.

They write to the registry in the store directly, so they need access to Redis, not a
token; the HTTP endpoints offer the same operations behind the bearer token.
"""

from __future__ import annotations

import argparse
import getpass
import socket
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from windvane.cli.options import store_options
from windvane.definitions.plan import load_plan
from windvane.errors import UsageError
from windvane.models.registry import Arm, ModelRegistry
from windvane.serving.state import feature_shapes
from windvane.store import open_store


def add_model_commands(commands: Any) -> None:
    pub = commands.add_parser("publish", help="validate and store a coefficient snapshot")
    pub.add_argument("file", metavar="FILE", help="the snapshot document (JSON)")
    pub.add_argument("--model", required=True, metavar="NAME", help="the model's name")
    pub.add_argument("--activate", action="store_true", help="make it the only active arm")
    pub.add_argument("--by", default=_who(), help="who publishes (default user@host)")
    store_options(pub)
    pub.set_defaults(run=_publish)

    act = commands.add_parser(
        "activate", help="set a model's traffic split, e.g. v7=90 v8=10 (first = control)"
    )
    act.add_argument(
        "arms", nargs="+", metavar="VERSION[=WEIGHT]",
        help="published versions with their traffic weights; the first is the control",
    )  # fmt: skip
    act.add_argument("--model", required=True, metavar="NAME", help="the model's name")
    act.add_argument(
        "--by", default=_who(), help="who does it, for the audit trail (default user@host)"
    )
    store_options(act)
    act.set_defaults(run=_activate)

    back = commands.add_parser("rollback", help="restore the previously active split")
    back.add_argument("--model", required=True, metavar="NAME", help="the model's name")
    back.add_argument(
        "--by", default=_who(), help="who does it, for the audit trail (default user@host)"
    )
    store_options(back)
    back.set_defaults(run=_rollback)

    lst = commands.add_parser("models", help="list models, versions and active splits")
    lst.add_argument("--model", metavar="NAME", help="one model's history and audit trail")
    store_options(lst)
    lst.set_defaults(run=_models)


@contextmanager
def _registry(args: argparse.Namespace, with_features: bool) -> Iterator[ModelRegistry]:
    """The registry in ``--store``, closed with the command."""
    features = feature_shapes(load_plan(args.defs)) if with_features else {}
    with open_store(args.store) as store:
        yield ModelRegistry(store, features)


def _publish(args: argparse.Namespace) -> int:
    try:
        document = Path(args.file).read_bytes()
    except OSError as exc:
        raise UsageError(f"cannot read snapshot {args.file}: {exc.strerror}") from None
    with _registry(args, True) as registry:
        meta = registry.publish(args.model, document, args.by, args.activate)
    state = "published and activated" if args.activate else "published (not active)"
    sys.stdout.write(f"{args.model} {meta['version']} {state}, checksum {meta['checksum'][:12]}\n")
    return 0


def parse_arms(texts: list[str]) -> list[Arm]:
    arms = []
    for text in texts:
        version, _, weight = text.partition("=")
        try:
            arms.append(Arm(version, float(weight) if weight else 100.0))
        except ValueError:
            raise UsageError(f"{text!r}: write VERSION or VERSION=WEIGHT, e.g. v7=90") from None
    return arms


def _activate(args: argparse.Namespace) -> int:
    with _registry(args, False) as registry:
        split = registry.activate(args.model, parse_arms(args.arms), args.by)
    sys.stdout.write(f"{args.model}: {_arms(split.to_dict())}\n")
    return 0


def _rollback(args: argparse.Namespace) -> int:
    with _registry(args, False) as registry:
        split = registry.rollback(args.model, args.by)
    sys.stdout.write(f"{args.model} rolled back to {_arms(split.to_dict())}\n")
    return 0


def _models(args: argparse.Namespace) -> int:
    with _registry(args, False) as registry:
        _list_models(args, registry)
    return 0


def _list_models(args: argparse.Namespace, registry: ModelRegistry) -> None:
    names = [args.model] if args.model else registry.models()
    if not names:
        sys.stdout.write("no models published\n")
    for name in names:
        split = registry.active(name)
        active = {} if split is None else {a.version: a.weight for a in split.arms}
        state = f"active {_arms(split.to_dict())}" if split else "no active split"
        sys.stdout.write(f"{name}: {state}\n")
        for meta in registry.history(name):
            weight = active.get(meta["version"])
            arm = f"  weight {weight:g}" if weight is not None else ""
            sys.stdout.write(
                f"  {meta['version']:<20} {_when(meta['published_at'])}  {meta['checksum'][:12]}  "
                f"by {meta['by']}{arm}\n"
            )
        if args.model:
            sys.stdout.write("  audit:\n")
            for entry in registry.audit(name):
                when = entry.get("published_at") or entry.get("activated_at") or entry.get("at")
                sys.stdout.write(f"    {_when(when)}  {entry['action']:<9} by {entry.get('by')}\n")


def _arms(split: dict[str, Any]) -> str:
    return " ".join(f"{a['version']}={a['weight']:g}" for a in split["arms"])


def _when(ts: float | None) -> str:
    if ts is None:
        return "?"
    return datetime.fromtimestamp(ts, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _who() -> str:
    try:
        return f"{getpass.getuser()}@{socket.gethostname()}"
    except (KeyError, OSError):
        return "unknown"

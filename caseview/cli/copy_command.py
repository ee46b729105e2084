"""``caseview copy SOURCE DEST``: a whole workspace from a SQLite file to PostgreSQL or back."""

from __future__ import annotations

from .options import actor_name, add_actor_option


def register(sub) -> None:
    p = sub.add_parser("copy", help="copy a whole workspace between a SQLite file and a PostgreSQL database",
                       description="Copy every case, contact (with earlier versions), closure, model version, "
                                   "review, rule, setting and the audit trail from SOURCE to DEST, where each is "
                                   "a workspace file path or a PostgreSQL URL (postgresql://[user@]host[:port]/db "
                                   "or postgresql:///db?host=/socket/dir; passwords from PGPASSWORD, ~/.pgpass or "
                                   "a service file). DEST must be a new file or an empty database. The audit "
                                   "chain and every record are verified at DEST before the copy is kept.")
    p.add_argument("source", metavar="SOURCE")
    p.add_argument("destination", metavar="DEST")
    add_actor_option(p)
    p.set_defaults(run=run_copy)


def run_copy(args) -> int:
    from caseview.operations.workspace_copy import copy_workspace

    result = copy_workspace(args.source, args.destination, actor_name(args))
    copied = ", ".join(f"{table} {n}" for table, n in sorted(result.rows.items()) if n)
    print(f"copied to {result.destination}: {copied}")
    print(f"audit trail verified at the destination: {result.n_entries} entries, {result.n_records} records")
    print(f"source chain head at the copy: {result.source_head}")
    print(f"destination chain head: {result.destination_head}")
    return 0

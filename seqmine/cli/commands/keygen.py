"""``seqmine keygen KEY_FILE``: write a strong pseudonymization key, readable by its owner only."""

from __future__ import annotations

__all__ = ["NAME", "HELP", "DESCRIPTION", "add_arguments", "run"]

NAME = "keygen"
HELP = "write a new random key for --pseudonymize (owner-only permissions)"
DESCRIPTION = (
    "Write 256 random bits as 64 hex characters to KEY_FILE, created with permissions "
    "that let only its owner read it (0600). Give the file to --pseudonymize of analyze, "
    "encode, validate and watch: the same key gives the same pseudonyms in every run. "
    "Keep it apart from the outputs, and keep a copy: without the key the pseudonyms "
    "cannot be reproduced. An existing file is never overwritten.")


def add_arguments(p):
    p.add_argument("key_file", metavar="KEY_FILE", help="file to create (must not exist)")


def run(args):
    from ...inputs.privacy import write_key
    path = write_key(args.key_file)
    if not args.quiet:
        print(f"key written to {path} (readable by you only); keep it apart from the outputs")
    return 0

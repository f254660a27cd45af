"""``troubleshoot export MODEL --format xmlbif|dot|mef [-o FILE]``.

The output path is checked before any work; the file is written atomically
(see :mod:`troubleshoot.files`).
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

FORMATS = ("xmlbif", "dot", "mef")


def add_parser(subparsers, name):
    p = subparsers.add_parser(
        name, help="write the model's network (XMLBIF, DOT) or its fault tree (Open-PSA MEF)",
        description="Write the diagnostic network of MODEL as XMLBIF 0.3 or Graphviz DOT, or its fault tree "
                    "in the Open-PSA Model Exchange Format. MODEL is a model file or a demo name. A file "
                    "given with -o is written atomically, only to a new path or over a regular file.")
    p.add_argument("model", metavar="MODEL")
    p.add_argument("--format", required=True, choices=FORMATS, help="output format")
    p.add_argument("-o", "--output", metavar="FILE", help="file to write (default: standard output)")
    return p


def export_bytes(model, fmt: str) -> bytes:
    """The model in one of :data:`FORMATS`, as the bytes of the file."""
    if fmt == "mef":
        from troubleshoot.model.mef.write import write_mef

        with tempfile.TemporaryDirectory() as tmp:
            out = Path(tmp) / "model.xml"
            write_mef(model, out)
            return out.read_bytes()
    from troubleshoot.engine.network import build_network

    net = build_network(model)
    if fmt == "xmlbif":
        from troubleshoot.engine.xmlbif import network_to_xmlbif

        return network_to_xmlbif(net)
    from troubleshoot.engine.graphviz import network_to_dot

    return network_to_dot(net).encode("utf-8")


def run(args) -> int:
    from troubleshoot.files import check_output_path, write_output
    from troubleshoot.model.source import load_any_model

    if args.output:
        check_output_path(args.output)
    model, warnings = load_any_model(args.model)
    for w in warnings:
        print(f"troubleshoot: {w}", file=sys.stderr)
    data = export_bytes(model, args.format)
    if args.output:
        write_output(args.output, data)
        print(f"wrote {args.output} ({args.format})", file=sys.stderr)
    else:
        sys.stdout.write(data.decode("utf-8"))
    return 0

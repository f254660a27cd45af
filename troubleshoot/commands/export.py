"""``troubleshoot export MODEL --format xmlbif|dot|mef [-o FILE]``."""

from __future__ import annotations

import sys
from pathlib import Path

FORMATS = ("xmlbif", "dot", "mef")


def add_parser(subparsers, name):
    p = subparsers.add_parser(
        name, help="write the model's network (XMLBIF, DOT) or its fault tree (Open-PSA MEF)",
        description="Write the diagnostic network of MODEL as XMLBIF 0.3 or Graphviz DOT, or its fault tree "
                    "in the Open-PSA Model Exchange Format. MODEL is a model file or a demo name.")
    p.add_argument("model", metavar="MODEL")
    p.add_argument("--format", required=True, choices=FORMATS, help="output format")
    p.add_argument("-o", "--output", metavar="FILE", help="file to write (default: standard output)")
    return p


def run(args) -> int:
    from troubleshoot.model.source import load_any_model

    model, warnings = load_any_model(args.model)
    for w in warnings:
        print(f"troubleshoot: {w}", file=sys.stderr)
    if args.format == "mef":
        from troubleshoot.model.mef.write import write_mef

        if not args.output:
            import tempfile

            with tempfile.TemporaryDirectory() as tmp:
                out = Path(tmp) / "model.xml"
                write_mef(model, out)
                sys.stdout.write(out.read_text(encoding="utf-8"))
            return 0
        write_mef(model, args.output)
    else:
        from troubleshoot.engine.network import build_network

        net = build_network(model)
        if args.format == "xmlbif":
            from troubleshoot.engine.xmlbif import network_to_xmlbif

            data = network_to_xmlbif(net)
        else:
            from troubleshoot.engine.graphviz import network_to_dot

            data = network_to_dot(net).encode("utf-8")
        if args.output:
            Path(args.output).write_bytes(data)
        else:
            sys.stdout.write(data.decode("utf-8"))
    if args.output:
        print(f"wrote {args.output} ({args.format})", file=sys.stderr)
    return 0

"""The network as a Graphviz DOT digraph: a picture of the fault tree and its checks."""

from __future__ import annotations

from troubleshoot.engine.network import AUX, CHECK, CHECK_AUX, GATE, ROOT, Network

#: Shape per role, so the kind of a node reads without colour.
_SHAPES = {ROOT: "ellipse", GATE: "box", AUX: "box", CHECK: "diamond", CHECK_AUX: "diamond"}


def _quote(text: str) -> str:
    """A DOT quoted string: backslashes and quotes escaped, a line break written as DOT's ``\\n``."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def network_to_dot(network: Network) -> str:
    """DOT text: roots as ellipses, gates as boxes (derived ones dashed), checks as diamonds."""
    lines = [f"digraph {_quote(network.model.name)} {{", "  rankdir=BT;", "  node [fontsize=10];"]
    model = network.model
    for node, data in network.graph.nodes(data=True):
        label = data.get("label") or node
        if node in model.gate_by_id:
            label = f"{label}\n{model.gate_by_id[node].kind.upper()}"
        elif data["role"] == ROOT:
            label = f"{label}\np = {model.prior_of(node):.3g}"
        elif data["role"] == CHECK:  # its outcomes, normal first, so a graded reading shows its scale
            label = f"{label}\n{' | '.join(data['states'])}"
        style = ', style=dashed' if data["role"] in (AUX, CHECK_AUX) else ""
        lines.append(f"  {_quote(node)} [label={_quote(label)}, shape={_SHAPES[data['role']]}{style}];")
    for a, b in network.graph.edges:
        lines.append(f"  {_quote(a)} -> {_quote(b)};")
    lines.append("}")
    return "\n".join(lines) + "\n"

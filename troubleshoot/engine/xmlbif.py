"""The network in XMLBIF 0.3 (an open interchange format for Bayesian networks).

Variable names are the model's ids; events and gates have the states
``ok``, ``failed`` in that order; checks and symptoms have their K outcome
names in the model's order (normal first), with the noisy-OR or noisy-MAX
table of :mod:`troubleshoot.engine.observation`; nodes added by the exact
decomposition of wide gates and wide checks appear under derived names
containing ``~``.

References
----------
F. G. Cozman, "The Interchange Format for Bayesian Networks" (XMLBIF 0.3), 1998.
"""

from __future__ import annotations

from lxml import etree

from troubleshoot.engine.network import Network


def network_to_xmlbif(network: Network) -> bytes:
    """Serialise a network; each table lists the node's state fastest, first parent slowest."""
    bif = etree.Element("BIF", VERSION="0.3")
    net = etree.SubElement(bif, "NETWORK")
    etree.SubElement(net, "NAME").text = network.model.name
    graph = network.graph
    for node, data in graph.nodes(data=True):
        var = etree.SubElement(net, "VARIABLE", TYPE="nature")
        etree.SubElement(var, "NAME").text = node
        for state in data["states"]:
            etree.SubElement(var, "OUTCOME").text = state
        if data.get("label"):
            etree.SubElement(var, "PROPERTY").text = f"label = {data['label']}"
        etree.SubElement(var, "PROPERTY").text = f"role = {data['role']}"
    for node, data in graph.nodes(data=True):
        definition = etree.SubElement(net, "DEFINITION")
        etree.SubElement(definition, "FOR").text = node
        for parent in data["parents"]:
            etree.SubElement(definition, "GIVEN").text = parent
        etree.SubElement(definition, "TABLE").text = " ".join(repr(float(x)) for x in data["table"].ravel())
    return etree.tostring(bif, xml_declaration=True, encoding="UTF-8", pretty_print=True)

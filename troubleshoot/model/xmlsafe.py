"""Hardened XML reading shared by every file format the project reads.

A model file comes from whoever wrote it; reading one must never fetch a URL,
read another local file through an external entity, expand an entity bomb,
or swallow an enormous file. :func:`parse_xml_file` refuses all of those with
a :class:`~troubleshoot.errors.ModelError` naming the file and the line, and
turns every syntax error into one plain sentence.

References
----------
OWASP, *XML External Entity Prevention Cheat Sheet* (external entities,
billion laughs; common practice for hardening XML parsers).
"""

from __future__ import annotations

import os
import re

from lxml import etree

from troubleshoot.errors import ModelError, Problem

#: Largest file read, in bytes. A real model is a few hundred kilobytes.
DEFAULT_MAX_BYTES = 20 * 1024 * 1024


def safe_parser() -> etree.XMLParser:
    """An lxml parser that never resolves entities, loads a DTD or uses the network.

    ``huge_tree=False`` keeps libxml2's own limits on depth, text size and
    entity amplification in force.
    """
    return etree.XMLParser(
        resolve_entities=False,
        no_network=True,
        load_dtd=False,
        dtd_validation=False,
        huge_tree=False,
        remove_comments=False,
        remove_pis=True,
        collect_ids=False,
    )


def _error(path: str, line: int | None, message: str) -> ModelError:
    return ModelError([Problem(path, line, message)])


def _megabytes(size: int) -> str:
    return f"{size / (1024 * 1024):.1f} MB"


def parse_xml_file(path: str | os.PathLike, max_bytes: int = DEFAULT_MAX_BYTES) -> etree._Element:
    """Read an XML file with a hardened parser and return its root element.

    Parameters
    ----------
    path : str or path-like
        The file to read.
    max_bytes : int
        Files larger than this are refused before they are read.

    Returns
    -------
    lxml.etree._Element
        The root element; ``sourceline`` of each element is its 1-based line.

    Raises
    ------
    ModelError
        One problem naming the file (and line, when there is one) if the file
        is missing, too large, empty, not XML, cut short, names an external
        DTD or declares entities in a DOCTYPE (external entities and
        entity-expansion bombs are refused outright, never expanded).

    Notes
    -----
    A DOCTYPE with only an internal subset and no entity declaration is
    tolerated. One naming an external DTD (``SYSTEM`` or ``PUBLIC``) or
    declaring any ``<!ENTITY`` is refused, because a model needs neither and
    every entity attack starts with one. UTF-8, UTF-16 and UTF-32 files are
    read, with or without a byte-order mark.
    """
    from troubleshoot.errors import InputError
    from troubleshoot.files import read_input

    name = str(path)
    try:
        data = read_input(path, max_bytes, "XML file")
    except InputError as exc:
        message = str(exc)
        if message.startswith(name + ": "):
            message = message[len(name) + 2:]
        raise _error(name, None, message) from None
    return parse_xml_bytes(data, name)


def parse_xml_bytes(data: bytes, name: str) -> etree._Element:
    """Parse XML already read into memory, with the same checks as :func:`parse_xml_file`.

    ``name`` is the file name used in messages.

    Notes
    -----
    The encoding is found as XML 1.0 Appendix F says: a byte-order mark, or
    else the first bytes of ``<?xml`` in UTF-32 or UTF-16 (big or little
    endian), or else UTF-8 or the encoding the declaration names. A UTF-16
    or UTF-32 file is decoded here and handed to the parser as UTF-8 (same
    lines), so every such file reads the same with or without its mark.
    Before parsing, the text is searched for a DOCTYPE naming an external
    DTD (``SYSTEM`` or ``PUBLIC``) and for entity declarations; both are
    refused, so the parser never has a DTD or an entity to load.
    """
    if not data.strip():
        raise _error(name, None, "file is empty; a model file starts with <?xml version=\"1.0\"?>")
    data = _as_utf8(data, name)
    if b"\x00" in data[:4096]:
        raise _error(name, 1, "file holds binary data, not XML; check that this is the right file")
    external = _EXTERNAL_DTD.search(data)
    if external is not None:
        raise _external_dtd_refused(name, data, external)
    if b"<!ENTITY" in data:
        raise _entities_refused(name, data)
    try:
        root = etree.fromstring(data, safe_parser())
    except etree.XMLSyntaxError as exc:
        raise _error(name, _line_of(exc), plain_syntax_message(exc)) from None
    except ValueError as exc:  # e.g. an unsupported encoding declaration
        raise _error(name, 1, f"not readable as XML ({exc}); save the file as UTF-8") from None
    if root is None:
        raise _error(name, None, "no XML element found; check that this is the right file")
    docinfo = root.getroottree().docinfo
    if docinfo.system_url or docinfo.public_id:  # written in a way the search above missed
        raise _error(name, _doctype_line(data), _external_dtd_message(docinfo.public_id, docinfo.system_url))
    dtd = docinfo.internalDTD
    if dtd is not None and any(True for _ in dtd.iterentities()):
        raise _entities_refused(name, data)
    for entity in root.iter(etree.Entity):
        # An entity reference with no declaration at all: left unexpanded, refused.
        raise _error(
            name,
            entity.sourceline,
            f"the entity reference {entity.text} is refused (entities are never expanded); "
            "write the text out in full and remove the DOCTYPE",
        )
    return root


#: Byte-order marks and the first bytes of '<?' without one (XML 1.0, Appendix F).
_SIGNATURES = (
    (b"\x00\x00\xfe\xff", "utf-32-be", 4), (b"\xff\xfe\x00\x00", "utf-32-le", 4),
    (b"\xfe\xff", "utf-16-be", 2), (b"\xff\xfe", "utf-16-le", 2),
    (b"\x00\x00\x00<", "utf-32-be", 0), (b"<\x00\x00\x00", "utf-32-le", 0),
    (b"\x00<\x00?", "utf-16-be", 0), (b"<\x00?\x00", "utf-16-le", 0),
)

_DECLARED_ENCODING = re.compile(rb"""^(<\?xml[^>]*?\sencoding\s*=\s*)(["'])([A-Za-z0-9._-]*)\2""")


def _as_utf8(data: bytes, name: str) -> bytes:
    """The document as UTF-8 bytes when it is written in UTF-16 or UTF-32, else unchanged.

    The XML declaration's encoding is rewritten to UTF-8 in place, so line
    numbers stay those of the file.
    """
    found = next(((encoding, mark) for signature, encoding, mark in _SIGNATURES if data.startswith(signature)), None)
    if found is None:
        return data
    encoding, mark = found
    width = "UTF-32" if "32" in encoding else "UTF-16"
    try:
        text = data[mark:].decode(encoding)
    except UnicodeDecodeError:
        raise _error(name, 1, f"the file starts as {width} text but is not valid {width} "
                     "(cut short or mixed encodings?); save the file as UTF-8") from None
    encoded = text.encode("utf-8", errors="surrogatepass")
    declared = _DECLARED_ENCODING.match(encoded)
    if declared is not None:
        value = declared.group(3).decode("ascii").upper().replace("_", "-")
        if not value.startswith(("UTF-16", "UTF-32", "UCS-2", "UCS-4", "ISO-10646-UCS")):
            raise _error(name, 1, f"the file is written in {width} but its declaration says "
                         f"encoding=\"{declared.group(3).decode('ascii')}\"; save the file as UTF-8")
        encoded = declared.group(1) + declared.group(2) + b"UTF-8" + declared.group(2) + encoded[declared.end():]
    return encoded


#: A DOCTYPE naming an external DTD: <!DOCTYPE name SYSTEM "..."> or PUBLIC "..." "...".
_EXTERNAL_DTD = re.compile(rb"<!DOCTYPE\s+[^\s\[>]+\s+(SYSTEM|PUBLIC)\b\s*(?:([\"'])(.*?)\2)?\s*(?:([\"'])(.*?)\4)?",
                           re.DOTALL)


def _external_dtd_message(public_id: str | None, system_url: str | None) -> str:
    where = system_url or public_id or "an external file"
    kind = "on the network" if re.match(r"[A-Za-z][A-Za-z0-9+.-]*://", where) else "in another file"
    return (f"the DOCTYPE names an external DTD ({where!r}, {kind}); external DTDs are never read "
            "or fetched, so the file is refused: remove the DOCTYPE line (a model file needs none)")


def _external_dtd_refused(name: str, data: bytes, match: re.Match) -> ModelError:
    if match.group(1) == b"PUBLIC":
        public, system = match.group(3), match.group(5)
    else:
        public, system = None, match.group(3)
    def decode(raw: bytes | None) -> str | None:
        return raw.decode("utf-8", errors="replace") if raw is not None else None

    return _error(name, data.count(b"\n", 0, match.start()) + 1,
                  _external_dtd_message(decode(public), decode(system)))


def _entities_refused(name: str, data: bytes) -> ModelError:
    return _error(
        name,
        _doctype_line(data),
        "the DOCTYPE declares entities (<!ENTITY ...>), which are refused for safety "
        "(external entities and entity-expansion bombs); remove the DOCTYPE and write the text out in full",
    )


def _line_of(exc: etree.XMLSyntaxError) -> int | None:
    line = exc.lineno if exc.lineno and exc.lineno > 0 else None
    if line is None and getattr(exc, "position", None):
        line = exc.position[0] or None
    return line


def _doctype_line(data: bytes) -> int | None:
    index = data.find(b"<!DOCTYPE")
    return data.count(b"\n", 0, index) + 1 if index >= 0 else None


_SYNTAX_REWRITES: list[tuple[re.Pattern[str], str]] = [
    (re.compile(r"Premature end of data in tag (\S+) line (\d+)"),
     r"the file ends before <\1> (opened at line \2) is closed; the file may be cut short - restore the full file"),
    (re.compile(r"EndTag: '</' not found|Extra content at the end of the document"),
     "unexpected content after the root element; a model file has exactly one root element"),
    (re.compile(r"Opening and ending tag mismatch: (\S+) line (\d+) and (\S+)"),
     r"</\3> closes <\1> opened at line \2; fix the tag names so every element is closed in order"),
    (re.compile(r"Start tag expected, '<' not found|Document is empty"),
     "not an XML file (no '<' where the first element should start); check that this is the right file"),
    (re.compile(r"Input is not proper UTF-8.*"),
     "the text is not valid UTF-8; save the file as UTF-8"),
    (re.compile(r"Char 0x0 out of allowed range|PCDATA invalid Char value.*"),
     "the file holds characters not allowed in XML (binary data?); check that this is the right file"),
    (re.compile(r"Couldn't find end of Start Tag (\S+).*"),
     r"the start tag <\1> is not closed with '>'; the file may be cut short or mistyped"),
    (re.compile(r"Detected an entity reference loop|Maximum entity amplification.*|"
                r"xmlParseEntityRef: no name|Excessive depth.*|.*huge input lookup.*"),
     "the file exceeds the parser's safety limits (entity loop, deep nesting or huge text); it is refused"),
    (re.compile(r"Entity '(\S+)' not defined"),
     r"the entity &\1; is not defined; write the character itself (use &amp; for '&')"),
]


def plain_syntax_message(exc: etree.XMLSyntaxError) -> str:
    """One plain sentence for an XML syntax error, saying what to fix."""
    # libxml2 may append the offending source text on further lines: one line is kept.
    raw = ((exc.msg or str(exc)).strip().splitlines() or [""])[0].strip()
    raw = re.sub(r",? line \d+, column \d+$", "", raw)
    for pattern, replacement in _SYNTAX_REWRITES:
        match = pattern.search(raw)
        if match:
            return match.expand(replacement)
    return f"not well-formed XML: {raw}; fix the markup at this line"


# ---------------------------------------------------------------------------
# Schema validation with plain wording


def validation_problems(
    validator: etree._Validator,
    root: etree._Element,
    path: str,
    type_hints: dict[str, str] | None = None,
) -> list[Problem]:
    """Validate ``root`` against an lxml schema and word every violation plainly.

    Parameters
    ----------
    validator : lxml.etree.XMLSchema or lxml.etree.RelaxNG
        The schema.
    root : lxml.etree._Element
        The parsed document.
    path : str
        File name used in the problems.
    type_hints : dict, optional
        Schema type name -> what a value of that type looks like, for
        messages such as "is not a number (such as 0.02)".

    Returns
    -------
    list of Problem
        One per entry of the schema's error log, with its line; empty when valid.
    """
    validator.validate(root)
    return [
        Problem(path, entry.line if entry.line and entry.line > 0 else None,
                plain_schema_message(entry.message, type_hints or {}))
        for entry in validator.error_log
    ]


def _names(listing: str) -> str:
    names = [n.strip() for n in listing.split(",") if n.strip()]
    names = [f"<{n}>" if not n.startswith("#") else "another element" for n in names]
    if len(names) <= 1:
        return "".join(names)
    return ", ".join(names[:-1]) + " or " + names[-1]


_E = r"Element '([^']+)'"
_A = r", attribute '([^']+)'"


def plain_schema_message(message: str, type_hints: dict[str, str]) -> str:
    """One plain sentence for a libxml2 schema message, saying what to fix."""
    message = message.strip()

    def hint(type_name: str) -> str:
        return type_hints.get(type_name, f"a valid {type_name}")

    rules = [
        (_E + _A + r": '(.*)' is not a valid value of the (?:local )?atomic type '([^']+)'\.",
         lambda m: f"<{m[1]}> {m[2]}=\"{m[3]}\" is not {hint(m[4])}; correct the value"),
        (_E + r": '(.*)' is not a valid value of the (?:local )?atomic type '([^']+)'\.",
         lambda m: f"<{m[1]}> holds '{m[2]}', which is not {hint(m[3])}; correct the value"),
        (_E + _A + r": The attribute '[^']+' is not allowed\.",
         lambda m: f"<{m[1]}> does not take the attribute {m[2]}; remove it or correct its spelling"),
        (_E + r": The attribute '([^']+)' is required but missing\.",
         lambda m: f"<{m[1]}> needs the attribute {m[2]}; add {m[2]}=\"...\""),
        (_E + r": This element is not expected\. Expected is (?:one of )?\( (.*) \)\.",
         lambda m: f"<{m[1]}> is not expected here; expected {_names(m[2])} (check the order and spelling)"),
        (_E + r": This element is not expected\.",
         lambda m: f"<{m[1]}> is not allowed here; remove it or correct its spelling or place"),
        (_E + r": Missing child element\(s\)\. Expected is (?:one of )?\( (.*) \)\.",
         lambda m: f"<{m[1]}> is incomplete; add {_names(m[2])}"),
        (_E + _A + r": The value '(.*)' does not match the fixed value constraint '(.*)'\.",
         lambda m: f"<{m[1]}> {m[2]} must be \"{m[4]}\", not \"{m[3]}\""),
        (_E + _A + r": \[facet 'enumeration'\] The value '(.*)' is not an element of the set \{(.*)\}\.",
         lambda m: f"<{m[1]}> {m[2]}=\"{m[3]}\" is not allowed; use one of {m[4]}"),
        (_E + r": \[facet 'enumeration'\] The value '(.*)' is not an element of the set \{(.*)\}\.",
         lambda m: f"<{m[1]}> holds '{m[2]}', which is not allowed; use one of {m[3]}"),
        (_E + _A + r": \[facet 'minInclusive'\] The value '(.*)' is less than the minimum value allowed \('(.*)'\)\.",
         lambda m: f"<{m[1]}> {m[2]}=\"{m[3]}\" is below {m[4]}; give a number of {m[4]} or more"),
        (_E + _A + r": \[facet 'maxExclusive'\] The value '(.*)' must be less than 'INF'\.",
         lambda m: f"<{m[1]}> {m[2]}=\"{m[3]}\" is not a finite number; give a finite number such as 30"),
        # The one pattern of the model schema asks for text that is not blank.
        ("(?s)" + _E + r": \[facet 'pattern'\] The value '(.*)' is not accepted by the pattern '.*'\.",
         lambda m: f"<{m[1]}> is blank; write it in words"),
        (_E + r": Element content is not allowed, because the type definition is simple\.",
         lambda m: f"<{m[1]}> holds text only; remove the elements inside it"),
        (_E + r": Element content is not allowed, because the content type is empty\.",
         lambda m: f"<{m[1]}> takes attributes only; remove what is inside it"),
        (_E + r": Character content (?:other than whitespace )?is not allowed.*",
         lambda m: f"<{m[1]}> holds no text of its own; move the text into the element it belongs to (such as <label>)"),
        (_E + r": No matching global declaration available for the validation root\.",
         lambda m: f"<{m[1]}> is not the root element this format expects"),
    ]
    for pattern, render in rules:
        match = re.fullmatch(pattern, message)
        if match:
            return render(match)
    match = re.match(_E + r"(?:" + _A + r")?: (.*)", message)
    if match:
        where = f"<{match[1]}>" + (f" {match[2]}" if match[2] else "")
        return f"{where}: {match[3]}"
    return message

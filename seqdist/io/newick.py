"""Newick text: our own writer (:func:`seqdist.core.tree.write_newick`) and reader.

Writer
    Labels are written bare when they hold only characters that the Newick
    standard allows unquoted; otherwise they are put in single quotes with
    inner single quotes doubled (``'it''s'``). Underscores also trigger
    quoting, because the standard reads an unquoted underscore as a blank
    (strict readers such as dendropy turn ``a_b`` into ``a b``); quoted, every
    reader keeps the label exactly. Branch lengths are written with Python's
    ``repr`` (the shortest text that reads back to the same float: 17
    significant digits where needed, so never fewer than the 10 asked for).
    ``-0.0`` is written as ``0.0``. Children appear in the tree's order.
Reader
    Quoted and bare labels, branch lengths, internal node labels (kept as the
    node's name; one that is a number is also the node's ``support``, e.g.
    a bootstrap value), ``[...]`` comments (skipped), white space between
    tokens. Bare labels are kept as written (underscores are not turned
    into blanks, as most software does in practice). Errors name the file
    and character position. :func:`read_newick_file` also reads a NEXUS
    file (first line ``#NEXUS``; :mod:`seqdist.io.nexus_trees`).
Support
    Written after an internal node's closing parenthesis, before its length:
    ``(a,b)95:0.1``. seqdist writes bootstrap and consensus support in
    percent (0-100, common practice), with up to 6 significant digits.
"""

from __future__ import annotations

import re

from seqdist.core.errors import InputError

# the writer lives with the tree type; re-exported here beside the reader
from seqdist.core.tree import Node, Tree, format_length, quote_label, write_newick  # noqa: F401

__all__ = ["read_newick", "read_newick_file", "is_nexus", "write_newick", "quote_label", "format_length"]

_TOKEN = re.compile(r"""
    (?P<ws>\s+)
  | (?P<comment>\[[^\]]*\])
  | (?P<quoted>'(?:[^']|'')*')
  | (?P<punct>[(),:;])
  | (?P<bare>[^\s()\[\],:;']+)
""", re.VERBOSE)


def read_newick(text: str, source: str | None = None, rooted: bool | None = None) -> Tree:
    """Parse the first tree of a Newick text.

    Parameters
    ----------
    text : str
    source : str, optional
        File name for error messages.
    rooted : bool, optional
        Whether the root is meaningful. By default a tree whose root has
        exactly two children is taken as rooted, otherwise unrooted (common
        practice); ``[&R]`` / ``[&U]`` at the start decide when present.

    Returns
    -------
    Tree

    Raises
    ------
    InputError
        Malformed text, naming the position.

    Examples
    --------
    >>> t = read_newick("('it''s':1,(b,c):0.5,'d e':2e-3);")
    >>> t.labels(), t.root.children[1].length
    (["it's", 'b', 'c', 'd e'], 0.5)
    """
    where = f"{source}: " if source else ""
    hint = None
    head = text.lstrip()[:4].upper()
    if head == "[&R]":
        hint = True
    elif head == "[&U]":
        hint = False
    toks: list[tuple[str, str, int]] = []
    pos = 0
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None:
            what = "an unclosed comment" if text[pos] == "[" else f"unexpected character {text[pos]!r}"
            raise InputError(f"{where}Newick: {what} at position {pos + 1}")
        pos = m.end()
        if m.lastgroup in ("comment", "ws"):
            continue
        toks.append((m.lastgroup, m.group(), m.start() + 1))
        if m.group() == ";":
            break
    if not toks:
        raise InputError(f"{where}Newick: no tree found")
    if toks[-1][1] != ";":
        raise InputError(f"{where}Newick: the tree does not end with ';'")

    def fail(msg: str, tok) -> InputError:
        return InputError(f"{where}Newick: {msg} at position {tok[2]}")

    # The classic one-pass parse: `cur` is the node that the next label or
    # length belongs to; '(' descends to a new first child, ',' starts a
    # sibling, ')' climbs back to the parent.
    root = Node()
    cur = root
    i = 0
    while i < len(toks):
        tok = toks[i]
        kind, val, _ = tok
        if val == "(":
            if cur.name is not None or cur.length is not None or cur.children:
                raise fail("'(' after a label or length", tok)
            cur = cur.add_child(Node())
        elif val == ",":
            if cur.parent is None:
                raise fail("',' outside parentheses", tok)
            cur = cur.parent.add_child(Node())
        elif val == ")":
            if cur.parent is None:
                raise fail("unbalanced ')'", tok)
            cur = cur.parent
        elif val == ":":
            if i + 1 >= len(toks) or toks[i + 1][0] != "bare":
                raise fail("':' without a branch length", tok)
            if cur.length is not None:
                raise fail("a second branch length", tok)
            num = toks[i + 1][1]
            try:
                cur.length = float(num)
            except ValueError:
                raise fail(f"branch length '{num}' is not a number", toks[i + 1]) from None
            i += 1
        elif val == ";":
            if cur is not root:
                raise fail("unclosed '('", tok)
        else:
            if cur.name is not None or cur.length is not None:
                raise fail(f"unexpected label {val!r}", tok)
            cur.name = val[1:-1].replace("''", "'") if kind == "quoted" else val
        i += 1
    if root.is_leaf:
        raise InputError(f"{where}Newick: the tree has a single node")
    tree_rooted = rooted if rooted is not None else (hint if hint is not None else len(root.children) == 2)
    t = Tree(root, rooted=bool(tree_rooted))
    for n in t.preorder():
        if n.is_leaf and (n.name is None or n.name == ""):
            raise InputError(f"{where}Newick: a leaf has no label")
        if not n.is_leaf and n.name:
            n.support = _number(n.name)
    return t


def _number(text: str) -> float | None:
    """The finite number a label spells, else None (a name, not a support value)."""
    try:
        x = float(text)
    except ValueError:
        return None
    return x if x == x and abs(x) != float("inf") else None


def read_newick_file(path: str, rooted: bool | None = None) -> Tree:
    """Read the first tree of a Newick or NEXUS file (``-`` for standard input).

    A file whose first line is ``#NEXUS`` is read as NEXUS (the first tree
    of its TREES block, see :func:`seqdist.io.nexus_trees.read_nexus_trees`);
    any other as Newick. Same as :func:`seqdist.io.nexus_trees.read_tree_file`.
    """
    from seqdist.io.matrices import read_text

    text = read_text(path, "tree file")
    name = "<stdin>" if path == "-" else path
    if not text.strip():
        raise InputError(f"{name}: empty file")
    if is_nexus(text):
        from seqdist.io.nexus_trees import read_nexus_trees

        return read_nexus_trees(text, source=name, rooted=rooted, first_only=True)[0][1]
    return read_newick(text, source=name, rooted=rooted)


def is_nexus(text: str) -> bool:
    """Whether a text is NEXUS: its first token is ``#NEXUS`` (any case).

    Examples
    --------
    >>> is_nexus("#nexus\\nbegin trees;"), is_nexus("(a,b,c);")
    (True, False)
    """
    return text.lstrip("\ufeff \t\r\n")[:6].upper() == "#NEXUS"

"""NEXUS tree files: TREES blocks read and written.

The format is that of Maddison, Swofford & Maddison 1997 ("NEXUS: an
extensible file format for systematic information", Syst. Biol.
46:590-621): a file starting with ``#NEXUS``, then blocks
``BEGIN name; ... END;`` made of commands that end with ``;``; ``[...]``
are comments (they may nest); a label with blanks or punctuation is put in
single quotes, an inner quote doubled.

Reader (:func:`read_nexus_trees`, :func:`read_tree_file`)
    The TREES block: its optional ``TRANSLATE`` table (``key label``
    entries separated by commas) and its ``TREE name = description;``
    commands (``TREE * name`` too); the description is Newick, read by
    :func:`seqdist.io.newick.read_newick`, with ``[&R]`` / ``[&U]`` before it
    deciding whether the tree is rooted. A TAXA block's ``TAXLABELS`` are
    read too: a leaf may then name a taxon by its number (1 = the first),
    and a leaf that is neither a TRANSLATE key nor a taxon is an error.
    Other blocks (DATA, CHARACTERS, DISTANCES, ...) are skipped. As with
    our Newick reader, bare labels are kept as written: an underscore stays
    an underscore (the standard reads it as a blank, but in practice
    sequence ids carry underscores meant literally). Errors name the file
    and the line.
Writer (:func:`write_nexus_trees`)
    A TAXA block (``DIMENSIONS NTAX``, ``TAXLABELS``) and a TREES block with
    a ``TRANSLATE`` table (keys 1..n in TAXLABELS order: the tree then holds
    no label that a reader could take for a taxon number) and one ``TREE``
    command per tree, each with ``[&R]`` or ``[&U]``. Labels are quoted when
    they hold blanks, NEXUS punctuation or an underscore. Lengths and
    support as in our Newick writer.

Which format a tree output gets (:func:`tree_format_for`): the one asked
for, else NEXUS for the extensions ``.nex``, ``.nexus`` and ``.nxs``, else
Newick.
"""

from __future__ import annotations

import bisect
import os
import re
from typing import Iterator, Sequence

from seqdist.core.errors import InputError
from seqdist.core.tree import Tree, quote_label, write_newick

__all__ = ["read_nexus_trees", "read_tree_file", "write_nexus_trees", "quote_nexus", "TREE_FORMATS",
           "NEXUS_EXTENSIONS", "tree_format_for", "format_tree"]

TREE_FORMATS = ("newick", "nexus")
NEXUS_EXTENSIONS = (".nex", ".nexus", ".nxs")

# Characters that the standard makes punctuation, plus blanks and the
# underscore (which the standard reads as a blank): a label holding one is quoted.
_NEXUS_SPECIAL = set("()[]{}/\\,;:=*'\"`+-<>_")
_STOP = re.compile(r"[\[\];']")
_BRACKET = re.compile(r"[\[\]]")
_WORD = re.compile(r"""\s+|'(?:[^']|'')*'|[=,]|[^\s=,'\[]+""")


def quote_nexus(label: str) -> str:
    """A label as a NEXUS token: bare when safe, else single-quoted.

    Examples
    --------
    >>> quote_nexus("human"), quote_nexus("seq-1"), quote_nexus("it's"), quote_nexus("a_b")
    ('human', "'seq-1'", "'it''s'", "'a_b'")
    """
    return quote_label(label, _NEXUS_SPECIAL)


class _Text:
    """The file's text with line lookup for error messages."""

    def __init__(self, text: str, source: str | None):
        self.text = text
        self.where = f"{source}: " if source else ""
        self.newlines = [m.start() for m in re.finditer("\n", text)]

    def line(self, pos: int) -> int:
        return bisect.bisect_left(self.newlines, pos) + 1

    def error(self, pos: int, msg: str) -> InputError:
        return InputError(f"{self.where}line {self.line(pos)}: {msg}")


def _commands(doc: _Text, start: int) -> Iterator[tuple[int, int]]:
    """(start, end) of each command: the text up to a ';' outside comments and quotes (';' excluded)."""
    text = doc.text
    i = begin = start
    while True:
        m = _STOP.search(text, i)
        if m is None:
            rest = _strip_comments(doc, begin, len(text)).strip()
            if rest:
                raise doc.error(begin + len(text[begin:]) - len(text[begin:].lstrip()),
                                f"the command '{rest[:30]}' does not end with ';'")
            return
        c, i = m.group(), m.start()
        if c == "[":
            i = _skip_comment(doc, i)
        elif c == "]":
            raise doc.error(i, "']' outside a comment")
        elif c == "'":
            j = i + 1
            while True:
                k = text.find("'", j)
                if k < 0:
                    raise doc.error(i, "an unclosed quote")
                if text.startswith("''", k):
                    j = k + 2
                    continue
                break
            i = k + 1
        else:
            yield begin, i
            i = begin = i + 1


def _skip_comment(doc: _Text, i: int) -> int:
    """The position after the comment opening at ``i`` (comments nest)."""
    depth, j = 0, i
    while True:
        m = _BRACKET.search(doc.text, j)
        if m is None:
            raise doc.error(i, "an unclosed comment")
        depth += 1 if m.group() == "[" else -1
        j = m.end()
        if depth == 0:
            return j


def _strip_comments(doc: _Text, a: int, b: int) -> str:
    out, i = [], a
    while True:
        k = doc.text.find("[", i, b)
        if k < 0:
            out.append(doc.text[i:b])
            return "".join(out)
        out.append(doc.text[i:k])
        i = _skip_comment(doc, k)


def _words(doc: _Text, a: int, b: int) -> list[tuple[str, int]]:
    """The tokens of a command (comments skipped, quotes removed): (token, position)."""
    out, i, text = [], a, doc.text
    while i < b:
        if text[i] == "[":
            i = _skip_comment(doc, i)
            continue
        m = _WORD.match(text, i, b)
        tok = m.group()
        if not tok[0].isspace():
            out.append((tok[1:-1].replace("''", "'") if tok[0] == "'" else tok, i))
        i = m.end()
    return out


def read_nexus_trees(text: str, source: str | None = None, rooted: bool | None = None,
                     first_only: bool = False) -> list[tuple[str, Tree]]:
    """The trees of the TREES block of a NEXUS text, as ``(name, Tree)`` pairs.

    Parameters
    ----------
    text : str
        NEXUS text (its first token ``#NEXUS``).
    source : str, optional
        File name for error messages.
    rooted : bool, optional
        Force rooted or unrooted; by default ``[&R]`` / ``[&U]`` decide, else
        as for :func:`seqdist.io.newick.read_newick`.
    first_only : bool
        Stop after the first tree.

    Returns
    -------
    list of (str, Tree)
        Leaf labels translated through the TRANSLATE table; support values
        (numeric internal labels) kept as ``Node.support``.

    Raises
    ------
    InputError
        Not NEXUS, no TREES block or no tree in it, a malformed command or
        tree, a leaf that is neither a TRANSLATE key nor a taxon; naming the
        line.

    Examples
    --------
    >>> text = '''#NEXUS
    ... begin trees;
    ...   translate 1 human, 2 'chimp 2', 3 gorilla, 4 orang;
    ...   tree best = [&U] ((1:0.1,2:0.2)95:0.05,3:0.3,4:0.4);
    ... end;'''
    >>> (name, tree), = read_nexus_trees(text)
    >>> name, tree.labels(), tree.root.children[0].support, tree.rooted
    ('best', ['human', 'chimp 2', 'gorilla', 'orang'], 95.0, False)
    """
    from seqdist.io.newick import is_nexus, read_newick

    doc = _Text(text, source)
    if not is_nexus(text):
        raise InputError(f"{doc.where}not a NEXUS file (the first line is not '#NEXUS')")
    start = text.upper().find("#NEXUS") + len("#NEXUS")
    block = None
    block_line = 0
    taxlabels: list[str] | None = None
    translate: dict[str, str] | None = None
    saw_trees = False
    trees: list[tuple[str, Tree]] = []
    for a, b in _commands(doc, start):
        words = _words(doc, a, b)
        if not words:
            continue
        head, pos = words[0][0].upper(), words[0][1]
        if head == "BEGIN":
            if block is not None:
                raise doc.error(pos, f"BEGIN inside the {block} block (missing END;)")
            if len(words) < 2:
                raise doc.error(pos, "BEGIN without a block name")
            block, block_line = words[1][0].upper(), doc.line(pos)
            if block == "TREES":
                saw_trees = True
                translate = None
            continue
        if head in ("END", "ENDBLOCK"):
            if block is None:
                raise doc.error(pos, f"{head} outside a block")
            if block == "TREES" and trees and first_only:
                break
            block = None
            continue
        if block == "TAXA" and head == "TAXLABELS":
            taxlabels = [w for w, _ in words[1:]]
            if len(set(taxlabels)) < len(taxlabels):
                dup = next(w for w in taxlabels if taxlabels.count(w) > 1)
                raise doc.error(pos, f"taxon '{dup}' is listed twice in TAXLABELS")
        elif block == "TREES" and head == "TRANSLATE":
            translate = _translate(doc, words[1:], pos)
        elif block == "TREES" and head == "TREE":
            name, tree = _tree(doc, words, a, b, rooted, read_newick)
            _label_leaves(doc, pos, name, tree, translate, taxlabels)
            trees.append((name, tree))
            if first_only:
                break
    else:
        if block is not None and not (block == "TREES" and trees):
            raise InputError(f"{doc.where}the {block} block opened at line {block_line} has no END;")
    if not saw_trees:
        raise InputError(f"{doc.where}no TREES block (a NEXUS tree file needs 'BEGIN TREES; ... END;')")
    if not trees:
        raise InputError(f"{doc.where}the TREES block (line {block_line}) holds no TREE command")
    return trees


def _translate(doc: _Text, words, pos) -> dict[str, str]:
    table: dict[str, str] = {}
    entry: list[tuple[str, int]] = []
    for w in [*words, (",", -1)]:
        if w[0] != ",":
            entry.append(w)
            continue
        if len(entry) != 2:
            at = entry[0][1] if entry else pos
            shown = " ".join(x for x, _ in entry) or "(empty)"
            raise doc.error(at, f"TRANSLATE entry '{shown}' is not 'key label'")
        (key, at), (label, _) = entry
        if key in table:
            raise doc.error(at, f"TRANSLATE key '{key}' is given twice")
        table[key] = label
        entry = []
    return table


def _tree(doc: _Text, words, a, b, rooted, read_newick) -> tuple[str, Tree]:
    pos = words[0][1]
    rest = words[1:]
    if rest and rest[0][0] == "*":
        rest = rest[1:]
    if len(rest) < 2 or rest[1][0] != "=":
        raise doc.error(pos, "TREE command is not 'TREE name = (...)'")
    name, eq = rest[0][0], rest[1][1]
    body = doc.text[eq + 1:b] + ";"
    where = f"{doc.where}line {doc.line(pos)}, tree '{name}'"
    return name, read_newick(body, source=where, rooted=rooted)


def _label_leaves(doc: _Text, pos, name, tree: Tree, translate, taxlabels) -> None:
    known = set(taxlabels or ()) | set((translate or {}).values())
    for leaf in tree.leaves():
        lab = leaf.name
        if translate is not None and lab in translate:
            leaf.name = translate[lab]
        elif taxlabels is not None and lab not in known and lab.isdigit() and 1 <= int(lab) <= len(taxlabels):
            leaf.name = taxlabels[int(lab) - 1]  # a taxon by its number (the standard allows it)
        elif translate is not None and lab not in known:
            raise doc.error(pos, f"tree '{name}': leaf '{lab}' is neither a TRANSLATE key nor a taxon")
        elif taxlabels is not None and lab not in known:
            raise doc.error(pos, f"tree '{name}': leaf '{lab}' is not a taxon of the TAXA block")
    tree.check_labels(f"{doc.where}line {doc.line(pos)}, tree '{name}'")


def read_tree_file(path: str, rooted: bool | None = None) -> Tree:
    """The first tree of a Newick or NEXUS file (``-`` for standard input).

    NEXUS is recognised by its first line ``#NEXUS``; anything else is read
    as Newick. Same as :func:`seqdist.io.newick.read_newick_file`.
    """
    from seqdist.io.newick import read_newick_file

    return read_newick_file(path, rooted=rooted)


def write_nexus_trees(trees: Tree | Sequence[tuple[str, Tree]], *, lengths: bool = True,
                      support: bool = True) -> str:
    """NEXUS text with a TAXA block and a TREES block.

    Parameters
    ----------
    trees : Tree or sequence of (name, Tree)
        One tree (named ``tree``) or named trees.
    lengths, support : bool
        Write branch lengths and support values (as for
        :func:`seqdist.core.tree.write_newick`).

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> print(write_nexus_trees([("nj", read_newick("((a:1,'b c':2)95:0.5,d:1,e:1);"))]), end="")
    #NEXUS
    <BLANKLINE>
    BEGIN TAXA;
        DIMENSIONS NTAX=4;
        TAXLABELS a 'b c' d e;
    END;
    <BLANKLINE>
    BEGIN TREES;
        TRANSLATE
            1 a,
            2 'b c',
            3 d,
            4 e;
        TREE nj = [&U] ((1:1.0,2:2.0)95:0.5,3:1.0,4:1.0);
    END;
    """
    named = [("tree", trees)] if isinstance(trees, Tree) else list(trees)
    if not named:
        raise InputError("no tree to write")
    labels: list[str] = []
    seen: set = set()
    for _, t in named:
        for lab in t.check_labels():
            if lab not in seen:
                seen.add(lab)
                labels.append(lab)
    key = {lab: str(k + 1) for k, lab in enumerate(labels)}
    lines = ["#NEXUS", "", "BEGIN TAXA;", f"    DIMENSIONS NTAX={len(labels)};",
             "    TAXLABELS " + " ".join(quote_nexus(lab) for lab in labels) + ";", "END;", "",
             "BEGIN TREES;", "    TRANSLATE"]
    lines += [f"        {key[lab]} {quote_nexus(lab)}" + ("," if k < len(labels) - 1 else ";")
              for k, lab in enumerate(labels)]
    for name, t in named:
        body = write_newick(t, lengths=lengths, support=support,
                            quote=lambda lab: key[lab] if lab in key else quote_nexus(lab))
        lines.append(f"    TREE {quote_nexus(str(name))} = [&{'R' if t.rooted else 'U'}] {body.rstrip()}")
    lines += ["END;", ""]
    return "\n".join(lines)


def tree_format_for(path: str | None, explicit: str | None = None) -> str:
    """The format of a tree output: ``explicit``, else by extension, else Newick.

    Examples
    --------
    >>> tree_format_for("t.nex"), tree_format_for("t.NEXUS"), tree_format_for("t.nwk"), tree_format_for("-")
    ('nexus', 'nexus', 'newick', 'newick')
    """
    if explicit is not None:
        if explicit not in TREE_FORMATS:
            raise InputError(f"unknown tree format '{explicit}' (choose from {', '.join(TREE_FORMATS)})")
        return explicit
    if path and os.path.splitext(path)[1].lower() in NEXUS_EXTENSIONS:
        return "nexus"
    return "newick"


def format_tree(tree: Tree, fmt: str = "newick", name: str = "tree") -> str:
    """A tree as the text of a file in ``fmt`` (``newick`` or ``nexus``).

    Examples
    --------
    >>> from seqdist.io.newick import read_newick
    >>> format_tree(read_newick("(a,b,c);"))
    '(a,b,c);\\n'
    """
    if fmt == "newick":
        return write_newick(tree)
    if fmt == "nexus":
        return write_nexus_trees([(name, tree)])
    raise InputError(f"unknown tree format '{fmt}' (choose from {', '.join(TREE_FORMATS)})")

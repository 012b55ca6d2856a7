"""A fast reader of Newick and NEXUS tree files into the arrays of TreeArrays.

DendroPy builds a full object tree per sample (about 30 s per million tree-tips);
prepare_trees only needs the arrays. This reader tokenizes the whole file with one
regular expression and builds each tree with a stack, giving the arrays that
``trees.from_dendropy`` gives for the same file: tips in DendroPy's postorder (the
order they appear in the file), internal nodes in the order their parentheses close,
the same parent, lengths (the same ``float()`` of the same text) and labels.

It reads what tree files commonly hold: a TREES block with a TRANSLATE table, a TAXA
block, other blocks (skipped), ``[&R]``/``[&U]`` before a tree, comments between
tokens, quoted labels (``''`` for a quote), internal labels and support values
(ignored), several trees in a Newick file. Anything else, and every tree that would
fail a check of ``from_dendropy`` (unrooted base, missing or negative length,
duplicate or unlabelled tip, fewer than two tips), gives ``None``: "not handled",
and the caller reads the file with DendroPy, which gives today's result or today's
message. The reader never guesses.

Tokens follow DendroPy's NEXUS tokenizer: blanks are space, tab, CR and LF only;
``(),;:=`` end a label; ``{}\\"`` are single-character tokens; ``'`` opens a quoted
label only at the start of a token; a comment glued to the text after it (which
DendroPy would splice into a label) is not handled. Taxon names are matched without
regard to case in DendroPy, so a file holding two names that differ only in case is
not handled either.
"""

from __future__ import annotations

import re

import numpy as np

# one token per match (blanks are skipped by findall's search):
#   a comment not glued to the text after it | a quoted label | a delimiter |
#   an unquoted run (a quote may follow its first character, as in DendroPy) |
#   a stray bracket or an unterminated quote (never handled)
_TOKEN = re.compile(
    r"""\[[^\[\]]*\](?![^ \t\r\n(),;:=\[])"""
    r"""|'(?:[^']|'')*'"""
    r"""|[(),;:={}\\"]"""
    r"""|[^ \t\r\n\[\](),;:={}\\"'][^ \t\r\n\[\](),;:={}\\"]*"""
    r"""|[\[\]']"""
)
_DELIMITERS = frozenset("(),;:=")
_LABEL_START = frozenset('(),;:={}\\"[]')  # a token starting with none of these is a label
_DIGITS = re.compile(r"[0-9]+")
# characters tokenized at a time (then on to the next line end): the token list of a
# whole file costs ~185 bytes per tree-tip, 1 GB for 5,000 trees of 1,000 tips
CHUNK = 1 << 22


class NotHandled(Exception):
    """The file holds something this reader does not read the way DendroPy does."""


class _NeedMore(Exception):
    """A tree runs past the tokens read so far."""


class _Tokens:
    """The tokens of a text, read a chunk of whole lines at a time.

    ``items`` holds the tokens read and not yet dropped; ``more(start)`` drops
    ``items[:start]`` and appends the next chunk's tokens (False at the end of the text).
    Blanks end every token, so a cut after a line end splits no token, except a quoted
    label or a comment running over it: the chunk then holds a lone quote or bracket,
    and the rest of the text is tokenized in one go.
    """

    def __init__(self, text: str):
        self.text = text
        self.pos = 0
        self.items = []

    def more(self, start: int) -> bool:
        text, pos = self.text, self.pos
        if pos >= len(text):
            return False
        end = text.find("\n", pos + CHUNK)
        end = len(text) if end < 0 else end + 1
        new = _TOKEN.findall(text, pos, end)
        if _stray(new) and end < len(text):
            end = len(text)
            new = _TOKEN.findall(text, pos, end)
        if _stray(new):
            raise NotHandled("a stray bracket or an unterminated quote")
        self.pos = end
        self.items = self.items[start:] + new
        return True


# the longest run of tokens and blanks without a stray bracket or quote (never fails, so
# never backtracks)
_CLEAN = re.compile(r"""(?:[ \t\r\n]+|""" + _TOKEN.pattern.rsplit("|", 1)[0] + ")*")


_BRACKETS = re.compile(r"[\[\]]")


def unclosed_comment(text: str) -> int | None:
    """The line of a '[' that opens a comment no ']' closes, or None.

    DendroPy takes everything after such a bracket as one comment: it loops forever in a
    TAXA block (DendroPy 5.1) and silently drops the trees after it in a Newick file.
    Only the first stray bracket or quote is looked at: a '[' there opens a comment for
    DendroPy too, which nests brackets inside it; a nested or glued comment closes.
    """
    pos = _CLEAN.match(text).end()
    if pos >= len(text) or text[pos] != "[":
        return None
    depth = 0
    for bracket in _BRACKETS.findall(text, pos):
        depth += 1 if bracket == "[" else -1
        if depth == 0:
            return None
    return text.count("\n", 0, pos) + 1


def _stray(tokens) -> bool:
    """A lone bracket or quote: the only tokens of one of these characters."""
    return "[" in tokens or "]" in tokens or "'" in tokens


def read_tree_text(text: str, schema: str) -> list | None:
    """Every tree of a Newick or NEXUS file's text as (tip_labels, parent, length) arrays
    ready for ``trees._build``, or None when the file is not handled (see the module)."""
    tokens = _Tokens(text)
    try:
        if schema == "nexus":
            raw = _nexus(tokens)
        else:
            raw = _newick_file(tokens)
        if not raw:
            raise NotHandled("no trees")
        names = set()
        for labels, _, _ in raw:
            names.update(labels)
        _check_case(names)
    except NotHandled:
        return None
    return raw


def _check_case(names) -> None:
    if len({n.lower() for n in names}) != len(names):
        raise NotHandled("names that differ only in case")


def _label(tok: str) -> str:
    """The text of a label token (quoted or not)."""
    if tok[0] == "'":
        value = tok[1:-1].replace("''", "'")
        # DendroPy compares token text, quoted or not: a quoted ',' would act as one
        if value in _DELIMITERS or value == "":
            raise NotHandled("quoted delimiter")
        return value
    if tok[0] in _LABEL_START:
        raise NotHandled(f"expected a label, found {tok!r}")
    return tok


def _is_comment(tok: str) -> bool:
    return tok[0] == "["


def _rooting(comments) -> bool:
    """True when the comments before a tree mark it rooted (the last of [&R]/[&U] wins)."""
    rooted = False
    for c in comments:
        body = c[1:-1].strip()
        if body in ("&R", "&r"):
            rooted = True
        elif body in ("&U", "&u"):
            rooted = False
    return rooted


def _tree(tokens: list, i: int, rooted: bool, translate=None):
    """Parse one tree starting at tokens[i] == "(" up to its ';'.

    Returns ((tip_labels, parent, length), index of the token after ';'). Temporary
    node ids are given in order of appearance; tips are then numbered in order of
    appearance and internal nodes in the order their parentheses close (DendroPy's
    postorder), the root last.
    """
    parent = [-1]  # temporary ids: 0 is the root, the first '('
    lengths = [None]
    tips = []
    labels = []
    closed = []
    stack = [0]
    cur = 0  # the open node new children hang from
    last = 0  # the node whose label or length comes next
    v = 0  # the last temporary id given
    state = 0  # 0 expect a node, 1 after ')', 2 after a label, 3 after a length
    add_parent, add_length, add_label = parent.append, lengths.append, labels.append
    i += 1
    try:
        while True:
            tok = tokens[i]
            i += 1
            # branches in order of frequency: ':' (twice per tip), labels, ',', '(', ')'
            if tok == ":":
                if state == 0 or state == 3:
                    raise NotHandled("misplaced length")
                lengths[last] = tokens[i]  # float() refuses anything but a number, later
                i += 1
                state = 3
            elif state == 0:
                if tok == "(":
                    v += 1
                    add_parent(cur)
                    add_length(None)
                    stack.append(v)
                    cur = v
                    continue
                c = tok[0]
                if c == "[":
                    continue
                if c == "'":
                    tok = _label(tok)
                elif c in _LABEL_START:
                    raise NotHandled(f"expected a label, found {tok!r}")
                v += 1
                add_parent(cur)
                add_length(None)
                tips.append(v)
                add_label(tok)
                last = v
                state = 2
            elif tok == ",":
                if not stack:
                    raise NotHandled("',' after the root")
                state = 0
            elif tok == ")":
                if not stack:
                    raise NotHandled("unbalanced ')'")
                last = stack.pop()
                closed.append(last)
                cur = stack[-1] if stack else -1
                state = 1
            elif tok == ";":
                if stack:
                    raise NotHandled("unbalanced '('")
                break
            elif tok[0] == "[":
                continue
            elif state == 1:
                _label(tok)  # an internal label or support value: checked, not kept
                state = 2
            else:
                raise NotHandled(f"unexpected {tok!r}")
    except IndexError:
        raise _NeedMore() from None
    n_tips = len(tips)
    if n_tips < 2 or len(set(labels)) != n_tips:
        raise NotHandled("fewer than two tips, or a tip twice")
    if not rooted and parent.count(0) > 2:
        raise NotHandled("unrooted")
    given = lengths[1:]
    if None in given:
        raise NotHandled("a branch without length")
    try:
        values = np.array([float(x) for x in given], dtype=np.float64)
        if lengths[0] is not None:
            float(lengths[0])  # DendroPy reads the root's length too (and ignores it)
    except ValueError:
        raise NotHandled("a length that is not a number") from None
    if not (np.isfinite(values).all() and (values >= 0).all()):
        raise NotHandled("a negative or non-finite length")
    if translate is not None:
        labels = [translate(x) for x in labels]
    total = len(parent)
    final = np.empty(total, dtype=np.int64)
    final[tips] = np.arange(n_tips)
    final[closed] = np.arange(n_tips, total)
    temp_parent = np.asarray(parent, dtype=np.int64)
    out_parent = np.empty(total, dtype=np.int64)
    out_parent[final[1:]] = final[temp_parent[1:]]
    out_parent[total - 1] = -1
    out_length = np.zeros(total)
    out_length[final[1:]] = values
    return (labels, out_parent, out_length), i


def _whole_tree(src: _Tokens, start: int, rooted: bool, translate=None):
    """_tree on src.items[start:], reading more of the text while the tree runs on."""
    while True:
        try:
            return _tree(src.items, start, rooted, translate)
        except _NeedMore:
            if not src.more(start):
                raise NotHandled("tree not ended by ';'") from None
            start = 0


def _newick_file(src: _Tokens) -> list:
    """Trees of a Newick file: each `[comments] ( ... ) ;`, comments before a tree setting
    its rooting, nothing else between trees."""
    out = []
    comments = []
    i = 0
    while True:
        if i >= len(src.items):
            if not src.more(i):
                return out
            i = 0
            continue
        tok = src.items[i]
        if _is_comment(tok):
            comments.append(tok)
            i += 1
            continue
        if tok != "(":
            raise NotHandled(f"expected '(' at the start of a tree, found {tok!r}")
        tree, i = _whole_tree(src, i, _rooting(comments))
        out.append(tree)
        comments = []


class _Nexus:
    """A cursor over NEXUS tokens; keywords compared in upper case, unquoted only."""

    def __init__(self, src: _Tokens):
        self.src = src
        self.i = 0
        self.comments = []

    def next(self):
        """The next token that is not a comment (None at the end); comments are kept."""
        while True:
            items = self.src.items
            if self.i >= len(items):
                if not self.src.more(self.i):
                    return None
                self.i = 0
                continue
            tok = items[self.i]
            self.i += 1
            if tok[0] != "[":
                return tok
            self.comments.append(tok)

    def keyword(self):
        tok = self.next()
        if tok is None:
            return None
        if tok[0] == "'":
            raise NotHandled("quoted keyword")
        return tok.upper()

    def expect(self, word):
        if self.keyword() != word:
            raise NotHandled(f"expected {word!r}")


def _nexus(src: _Tokens) -> list:
    cur = _Nexus(src)
    if cur.keyword() != "#NEXUS":
        raise NotHandled("no #NEXUS")
    taxa = None
    out = None
    while True:
        word = cur.keyword()
        if word is None:
            break
        if word != "BEGIN":
            raise NotHandled(f"{word!r} outside a block")
        block = cur.keyword()
        cur.expect(";")
        if block == "TAXA" and taxa is None and out is None:
            taxa = _taxa_block(cur)
        elif block == "TREES" and out is None:
            out = _trees_block(cur, taxa)
        elif block in ("TAXA", "TREES", None):
            raise NotHandled("a second TAXA or TREES block, or TAXA after TREES")
        else:
            _skip_block(cur)
    if out is None:
        raise NotHandled("no TREES block")
    return out


def _skip_block(cur: _Nexus) -> None:
    """Skip statements up to one that starts with END or ENDBLOCK (as DendroPy does)."""
    start = True
    while True:
        tok = cur.next()
        if tok is None:
            raise NotHandled("block not ended")
        word = tok.upper()
        if tok[0] == "'" and tok[1:-1].upper() in (";", "END", "ENDBLOCK"):
            raise NotHandled("quoted ';' or END in a skipped block")
        if start and word in ("END", "ENDBLOCK"):
            cur.expect(";")
            return
        start = tok == ";"


def _taxa_block(cur: _Nexus) -> set:
    """DIMENSIONS NTAX=n; TAXLABELS ...; END; -- the set of taxon names."""
    cur.expect("DIMENSIONS")
    cur.expect("NTAX")
    cur.expect("=")
    ntax = cur.next()
    if ntax is None or not _DIGITS.fullmatch(ntax):
        raise NotHandled("NTAX")
    cur.expect(";")
    cur.expect("TAXLABELS")
    names = []
    while True:
        tok = cur.next()
        if tok == ";":
            break
        if tok is None:
            raise NotHandled("TAXLABELS not ended")
        names.append(_label(tok))
    word = cur.keyword()
    if word not in ("END", "ENDBLOCK"):
        raise NotHandled("TAXA block holds more than DIMENSIONS and TAXLABELS")
    cur.expect(";")
    if len(names) != int(ntax) or len(set(names)) != len(names):
        raise NotHandled("TAXLABELS and NTAX disagree, or a name twice")
    _check_case(set(names))
    return set(names)


def _translate(cur: _Nexus, taxa) -> dict:
    table = {}
    while True:
        key = cur.next()
        value = cur.next()
        if key is None or value is None:
            raise NotHandled("TRANSLATE not ended")
        key, value = _label(key), _label(value)
        if taxa is not None and value not in taxa:
            raise NotHandled("TRANSLATE names a taxon not in the TAXA block")
        if key in table:
            raise NotHandled("a TRANSLATE key twice")
        table[key] = value
        sep = cur.next()
        if sep == ";":
            break
        if sep != ",":
            raise NotHandled("TRANSLATE separator")
    _check_case(table)  # DendroPy looks keys up without regard to case
    values = list(table.values())
    if len({v.lower() for v in values}) != len(values):
        raise NotHandled("two TRANSLATE keys for one taxon")
    return table


def _trees_block(cur: _Nexus, taxa) -> list:
    out = []
    table = None
    word = cur.keyword()
    if word == "TRANSLATE":
        table = _translate(cur, taxa)
        word = cur.keyword()
    if table is not None:

        def translate(x, table=table):
            try:
                return table[x]
            except KeyError:
                raise NotHandled(f"tip {x!r} not in TRANSLATE") from None
    else:

        def translate(x, taxa=taxa):
            # DendroPy would read a number as the position of a taxon
            if _DIGITS.fullmatch(x) or (taxa is not None and x not in taxa):
                raise NotHandled(f"tip {x!r}")
            return x

    while word == "TREE":
        name = cur.next()
        if name is None or name == "*":
            raise NotHandled("TREE without a name")
        _label(name)
        cur.expect("=")
        cur.comments = []
        tok = cur.next()
        if tok != "(":
            raise NotHandled("tree does not start with '('")
        tree, cur.i = _whole_tree(cur.src, cur.i - 1, _rooting(cur.comments), translate)
        out.append(tree)
        word = cur.keyword()
    if word is None:  # a file cut after a tree (a sampler still running)
        return out
    if word not in ("END", "ENDBLOCK"):
        raise NotHandled(f"{word!r} in the TREES block")
    tok = cur.next()
    if tok not in (";", None):
        raise NotHandled("END not followed by ';'")
    return out

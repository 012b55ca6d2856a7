"""The fast tree-file reader (mkforest/data/newick.py) against DendroPy.

Outside reference: DendroPy (general-purpose phylogenetics library), read exactly as
mkforest read every tree file before the fast reader (``read_trees(..., fast=False)``:
DendroPy's Newick/NEXUS parser, then ``from_dendropy``). For every tree file the tests
write (the input catalogue's shapes, the demo's files, random Yule trees, random trees
with polytomies and zero-length branches, odd formatting) the fast reader must give the
same arrays bit for bit; for every file it does not handle, and every bad tree, it must
say "not handled" so read_trees gives DendroPy's result or today's message.
"""

from __future__ import annotations

import numpy as np
import pytest
from catalogue_inputs import TAXA, posterior_nexus, unresolved_sample
from conftest import random_newick, yule_newick

from mkforest.data import newick
from mkforest.data.trees import _tree_file_text, parse_tree_file, read_trees
from mkforest.demo import make_demo
from mkforest.errors import InputError


def assert_same_trees(fast: list, slow: list) -> None:
    assert len(fast) == len(slow)
    for a, b in zip(fast, slow):
        assert a.index == b.index and a.tree_set == b.tree_set
        assert a.tip_labels == b.tip_labels
        for key in ("parent", "child_ptr", "children", "length"):
            x, y = getattr(a, key), getattr(b, key)
            assert x.dtype == y.dtype and x.shape == y.shape, key
            assert x.tobytes() == y.tobytes(), (key, x, y)  # bit for bit


def handled(path) -> bool:
    text, schema = _tree_file_text(path, None)
    return newick.read_tree_text(text, schema) is not None


def check_file(path, must_handle: bool = True) -> list:
    """The fast path and the DendroPy path give the same trees; the fast reader handled
    the file when it must."""
    if must_handle:
        assert handled(path), path.read_text()[:2000]
    slow = read_trees(path, fast=False)
    fast = read_trees(path)
    assert_same_trees(fast, slow)
    return fast


def dendropy_message(path):
    try:
        read_trees(path, fast=False)
    except InputError as exc:
        return str(exc)
    return None


def check_same_error(path, *needles) -> str:
    """A bad tree: the fast reader does not handle it, and read_trees gives DendroPy's message."""
    assert not handled(path)
    expected = dendropy_message(path)
    assert expected is not None
    with pytest.raises(InputError) as info:
        read_trees(path)
    assert str(info.value) == expected
    for needle in needles:
        assert needle in expected, expected
    return expected


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


# --------------------------------------------------------------------------- shapes users bring


def test_demo_files(tmp_path):
    """The demo's NEXUS files (TRANSLATE by numbers, [&R], fixed and general number formats)
    and its true tree in Newick."""
    paths = make_demo(tmp_path, n_tips=40, n_trees=30, seed=11)
    for key in ("trees", "trees_molecular"):
        assert len(check_file(paths[key])) == 30
    check_file(tmp_path / "true_tree.nwk")


@pytest.mark.parametrize("rooted", ["[&R] ", "[&U] ", ""])
@pytest.mark.parametrize("comments", [True, False])
def test_posterior_sample_as_samplers_write_it(tmp_path, rooted, comments):
    """The catalogue's posterior sample: TAXA block, TRANSLATE by numbers, quoted names with
    spaces and a quote, [&lnP=...] comments, polytomies, a consensus with no clade."""
    texts = unresolved_sample(n_trees=5, n_tips=8, seed=3, p_polytomy=0.3)
    path = posterior_nexus(tmp_path / "trees.nex", texts, TAXA, rooted=rooted, comments=comments)
    trees = check_file(path)
    assert set(trees[0].tip_labels) == set(TAXA)


def test_zero_length_and_very_short_branches(tmp_path):
    from test_catalogue import ZERO_TREES

    trees = check_file(write(tmp_path, "zero.nwk", "\n".join(ZERO_TREES) + "\n"))
    assert (trees[0].length[:-1] == 0).sum() == 3 and trees[0].length[6] == 1e-9


@pytest.mark.parametrize("seed", range(12))
def test_random_trees_with_polytomies_and_zero_lengths(tmp_path, seed):
    rng = np.random.default_rng(seed)
    texts = [
        random_newick(rng, int(rng.integers(2, 40)), p_polytomy=0.4, p_zero=0.2) for _ in range(8)
    ]
    check_file(write(tmp_path, "random.nwk", "\n".join(texts) + "\n"))


@pytest.mark.parametrize("seed", range(4))
def test_yule_trees(tmp_path, seed):
    rng = np.random.default_rng(100 + seed)
    texts = [
        yule_newick(rng, int(rng.integers(2, 300)), height=float(rng.uniform(0.01, 50)))
        for _ in range(10)
    ]
    trees = check_file(write(tmp_path, "yule.nwk", "\n".join(texts)))
    assert all(t.n_tips >= 2 for t in trees)


def test_formatting_users_meet(tmp_path):
    """Quoted names with spaces and '' escapes, underscores kept, internal labels and support
    values, exponents, comments between tokens and after lengths, a basal polytomy marked
    [&R], a unifurcation, CRLF line ends, a byte-order mark, blank lines and trailing blanks."""
    trees = [
        "[&R] ('Vexa minor':1e-3,('Quill''s pod':2.5E+00,Olm_tarsi:0.25)0.97:1.5e-1)root:0;",
        "[&lnP=-1200.5] [&R] ( (a_b : 1 , c[&rate=0.3]:2[&height=1] ) [x] : 0.5 , d:3 ) ;",
        "[&R]((a:1,b:1,c:1,d:1):1,(e:1,f:1):2,g:4);",
        "[ &r ] (a:1,b:1,c:1);",
        "((a:1,b:1):1):0.5;",
        "[&R] ('a b':.5,'c;d':5.,'(e)f':0.5e-5)'1.0':1;",
        "(x_1:0,'x 1':0);",
        "[&R](Tax.1:1,Tax-2:2,'Tax''3''':3,Tax#4:4)100:0;",
    ]
    text = "\r\n".join(trees) + "   \r\n\r\n  \t\n"
    path = tmp_path / "odd.nwk"
    path.write_bytes(b"\xef\xbb\xbf" + text.encode())
    out = check_file(path)
    assert out[0].tip_labels == ("Vexa minor", "Quill's pod", "Olm_tarsi")
    assert out[0].length[0] == 1e-3
    assert out[1].tip_labels == ("a_b", "c", "d")
    assert out[2].n_nodes == 7 + 3 and out[4].n_nodes == 4
    assert out[5].tip_labels == ("a b", "c;d", "(e)f")
    assert out[7].tip_labels[2] == "Tax'3'"


def test_nexus_variants(tmp_path):
    """Keywords in any case, TRANSLATE by names, no TAXA block, a TAXA block without
    TRANSLATE, a data block skipped (braces in it), ENDBLOCK, a file cut after its last tree
    (a sampler still running), comments between the tree's name and '='."""
    by_names = (
        "#nexus\n[a comment]\nbegin trees;\n translate\n  a 'Vexa minor',\n  b Olm_tarsi,"
        "\n  c 'Quill''s pod';\n tree one [&W 1] = [&R] ((a:1,b:1):1,c:2);\n"
        " Tree two = [&U][&lnP=-3] ((c:1,b:1):1,a:2);\nend;\n"
    )
    check_file(write(tmp_path, "names.nex", by_names))
    taxa = (
        "#NEXUS\nBEGIN TAXA;\n DIMENSIONS NTAX=3;\n TAXLABELS x1 'y 2' z_3;\nEND;\n"
        'BEGIN CHARACTERS;\n DIMENSIONS NCHAR=2;\n FORMAT SYMBOLS="01";\n MATRIX\n'
        "  x1 0{01}\n  'y 2' 1?\n  z_3 10\n ;\nEND;\n"
        "BEGIN TREES;\n TREE t1 = ((x1:1,'y 2':1):1,z_3:2);\nENDBLOCK;\n"
        "begin assumptions; options deftype=unord; end;\n"
    )
    check_file(write(tmp_path, "taxa.nex", taxa))
    cut = (
        "#NEXUS\nBEGIN TREES;\n TRANSLATE 1 p, 2 q, 3 r;\n"
        " TREE s0 = [&R] ((1:1,2:1):1,3:2);\n TREE s1 = [&R] ((1:1,3:1):1,2:2);\n"
    )
    assert len(check_file(write(tmp_path, "cut.nex", cut))) == 2


@pytest.mark.parametrize("chunk", [1, 7, 60])
def test_files_read_a_few_lines_at_a_time_give_the_same_trees(tmp_path, monkeypatch, chunk):
    """The reader tokenizes a chunk of lines at a time (memory): trees, quoted labels and
    comments running over a cut give what the whole file gives."""
    texts = {
        "over_lines.nwk": (
            "[&R] (('Vexa\nminor':1,\n(b:1,\nc:2)\n:1)[a comment\nover lines]:0.5,\n"
            "'it''s\n''':3);\n[&R]\n((a:1,b:1):1,'c d':2);\n"
        ),
        "over_lines.nex": (
            "#NEXUS\n[a comment\nover lines]\nBEGIN TREES;\n TRANSLATE\n 1 'a\nb',\n"
            " 2 c, 3 d;\n TREE\n s1 =\n [&R]\n ((1:1,\n 2:1):1,\n 3:2);\nEND;\n"
        ),
    }
    paths = make_demo(tmp_path / "demo", n_tips=12, n_trees=4, seed=5)
    texts["demo.nex"] = paths["trees"].read_text()
    for name, text in texts.items():
        schema = "nexus" if name.endswith(".nex") else "newick"
        whole = newick.read_tree_text(text, schema)
        assert whole is not None, name
        monkeypatch.setattr(newick, "CHUNK", chunk)
        cut = newick.read_tree_text(text, schema)
        monkeypatch.undo()
        assert cut is not None and len(cut) == len(whole)
        for a, b in zip(cut, whole):
            assert a[0] == b[0] and a[1].tobytes() == b[1].tobytes()
            assert a[2].tobytes() == b[2].tobytes()
        check_file(write(tmp_path, name, text))


# --------------------------------------------------------------------------- bad trees

BAD = {
    # name: (tree file text, words the message must hold)
    "unrooted": (
        "(a:0.3,b:0.2,((c:0.1,d:0.4):0.2,(e:0.3,f:0.1):0.1):0.3);\n",
        ["tree 0", "unrooted", "trees.root"],
    ),
    "unrooted_marked": ("[&R] ((a:1,b:1):1,c:1);\n[&U] (a:1,b:1,c:1);\n", ["tree 1", "unrooted"]),
    "branch_without_length": (
        "[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f);\n",
        ["tree 0", "tip 'f'", "no length"],
    ),
    "internal_without_length": ("((a:1,b:1),c:1);\n", ["the ancestor of 'a' and 'b'", "no length"]),
    "negative_branch": ("[&R] ((a:1,b:-0.5):1,(c:1,(d:1,e:1):1):1,f:1);\n", ["tip 'b'", "-0.5"]),
    "infinite_branch": ("((a:inf,b:1):1,c:1);\n", ["tip 'a'", "inf"]),
    "nan_branch": ("((a:1,b:1):nan,c:1);\n", ["nan"]),
    "duplicate_tip": ("[&R] ((a:1,a:1):1,(c:1,(d:1,e:1):1):1,f:1);\n", ["'a'", "more than once"]),
    "unlabelled_tip": ("((a:1,:1):1,c:1);\n", ["no label"]),
    "one_tip": ("(a:1);\n", ["fewer than two tips"]),
    "unbalanced_parentheses": ("[&R] ((a:1,b:1):1,(c:1,(d:1,e:1):1):1,f:1;\n", ["cannot be read"]),
    "length_not_a_number": ("((a:1,b:x1):1,c:1);\n", ["cannot be read"]),
    "root_length_not_a_number": ("((a:1,b:1):1,c:1):x;\n", ["cannot be read"]),
    "second_tree_bad": ("((a:1,b:1):1,c:1);\n((a:1,b:1):1,c:-1);\n", ["tree 1", "tip 'c'"]),
    "nexus_duplicate_via_translate": (
        "#NEXUS\nBEGIN TREES;\nTRANSLATE 1 a, 2 b, 3 c;\nTREE t = ((1:1,1:1):1,3:1);\nEND;\n",
        ["more than once"],
    ),
    "nexus_no_trees": (
        "#NEXUS\nBEGIN TAXA;\nDIMENSIONS NTAX=2;\nTAXLABELS a b;\nEND;\n",
        ["holds no trees"],
    ),
    "comments_only": ("[nothing here]\n", ["cannot be read"]),
}


@pytest.mark.parametrize("case", list(BAD))
def test_bad_trees_get_todays_message(tmp_path, case):
    text, needles = BAD[case]
    name = "trees.nex" if text.startswith("#NEXUS") else "trees.nwk"
    check_same_error(write(tmp_path, name, text), name, *needles)


UNCLOSED = {
    # DendroPy 5.1 silently drops the second tree (the comment runs to the end of the file)
    "trees.nwk": ("[&R] ((a:1,b:1):1,c:1);\n[sample 2\n[&R] ((a:1,c:1):1,b:1);\n", 2),
    # DendroPy 5.1 loops forever in the TAXA block (found by the mutation test below)
    "trees.nex": (
        "#NEXUS\nBEGIN TAXA;\n DIMENSIONS NTAX=3;\n TAXLABE[S a b c;\nEND;\n"
        "BEGIN TREES;\n TREE t = [&R] ((a:1,b:1):1,c:1);\nEND;\n",
        4,
    ),
}


@pytest.mark.parametrize("name", list(UNCLOSED))
def test_a_comment_never_closed_stops_with_the_file_and_line(tmp_path, name):
    """Not DendroPy's behaviour (a silent loss or a hang): one sentence naming the line."""
    import signal

    text, line = UNCLOSED[name]
    path = write(tmp_path, name, text)

    def hung(*_):
        raise AssertionError("read_trees did not return")

    previous = signal.signal(signal.SIGALRM, hung)
    signal.alarm(20)
    try:
        for read in (read_trees, lambda p: read_trees(p, root="midpoint"), parse_tree_file):
            with pytest.raises(InputError) as info:
                read(path)
            assert f"'{path}', line {line}: a comment opened with '[' is never closed" in str(
                info.value
            )
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    for text in (
        "[&R] ((a:1,b:1):1,c:1); [closed [nested] comment]\n",
        "[&R] ((a:1,'[b':1):1,c:1);\n",
    ):
        check_file(write(tmp_path, "fine.nwk", text), must_handle=False)


# --------------------------------------------------------------------------- not handled

NOT_HANDLED = {
    # constructs the fast reader leaves to DendroPy (which reads some, refuses others)
    "comment_inside_a_label": "((a[x]b:1,c:1):1,d:1);",
    "comment_before_a_length": "((a:[&x=1]1,c:1):1,d:1);",
    "comment_before_a_quote": "(([x]'a':1,c:1):1,d:1);",
    "nested_comment": "[a [nested] comment] ((a:1,c:1):1,d:1);",
    "unterminated_comment": "((a:1,c:1):1,d:1); [no end",
    "stray_bracket": "((a]:1,c:1):1,d:1);",
    "quoted_delimiter": "(('(':1,c:1):1,d:1);",
    "unterminated_quote": "(('a:1,c:1):1,d:1);",
    "names_differ_in_case": "((a:1,b:1):1,c:1);\n((A:1,b:1):1,c:1);",
    "single_node": "a:1;",
    "empty_statement": "((a:1,b:1):1,c:1);;((a:1,b:1):1,c:1);",
    "no_semicolon": "((a:1,b:1):1,c:1)",
    "two_lengths": "((a:1:2,b:1):1,c:1);",
    "label_after_length": "((a:1,b:1):1 x,c:1);",
    "quoted_length": "((a:'1',b:1):1,c:1);",
    "brace": "((a:1,b:1){1}:1,c:1);",
    "nexus_number_without_translate": "#NEXUS\nBEGIN TREES;\nTREE t = ((1:1,2:1):1,3:1);\nEND;",
    "nexus_tip_not_in_translate": "#NEXUS\nBEGIN TREES;\nTRANSLATE 1 a, 2 b;\n"
    "TREE t = ((1:1,2:1):1,c:1);\nEND;",
    "nexus_translate_keys_differ_in_case": "#NEXUS\nBEGIN TREES;\nTRANSLATE a x, A y, b z;\n"
    "TREE t = ((a:1,A:1):1,b:1);\nEND;",
    "nexus_translate_names_differ_in_case": "#NEXUS\nBEGIN TREES;\nTRANSLATE 1 a, 2 A, 3 b, 4 c;\n"
    "TREE t = ((2:1,3:1):1,4:1);\nEND;",
    "nexus_title": "#NEXUS\nBEGIN TREES;\nTITLE sample;\nTREE t = ((a:1,b:1):1,c:1);\nEND;",
    "nexus_star_tree": "#NEXUS\nBEGIN TREES;\nTREE * t = ((a:1,b:1):1,c:1);\nEND;",
    "nexus_tip_not_in_taxa": "#NEXUS\nBEGIN TAXA;\nDIMENSIONS NTAX=3;\nTAXLABELS a b c;\nEND;\n"
    "BEGIN TREES;\nTREE t = ((a:1,b:1):1,d:1);\nEND;",
    "nexus_two_tree_blocks": "#NEXUS\nBEGIN TREES;\nTREE t = ((a:1,b:1):1,c:1);\nEND;\n"
    "BEGIN TREES;\nTREE u = ((a:1,c:1):1,b:1);\nEND;",
    "nexus_junk_between_blocks": "#NEXUS\nhello\nBEGIN TREES;\nTREE t = ((a:1,b:1):1,c:1);\nEND;",
    "nexus_quoted_end_in_skipped_block": "#NEXUS\nBEGIN NOTES;\nTEXT 'x';\n'END';\nEND;\n"
    "BEGIN TREES;\nTREE t = ((a:1,b:1):1,c:1);\nEND;",
}


@pytest.mark.parametrize("case", list(NOT_HANDLED))
def test_what_the_fast_reader_does_not_handle_goes_to_dendropy(tmp_path, case):
    text = NOT_HANDLED[case]
    name = "trees.nex" if text.startswith("#NEXUS") else "trees.nwk"
    path = write(tmp_path, name, text + "\n")
    assert not handled(path)
    expected = dendropy_message(path)
    if expected is None:
        assert_same_trees(read_trees(path), read_trees(path, fast=False))
    else:
        with pytest.raises(InputError) as info:
            read_trees(path)
        assert str(info.value) == expected


# --------------------------------------------------------------------------- never guesses


def _mutations(rng, text, n):
    """Texts with one character deleted, doubled or replaced by a character that matters."""
    alphabet = list("(),;:[]' _&R=\n1e-.") + ["''", "[&R]", "[x]"]
    for _ in range(n):
        i = int(rng.integers(len(text)))
        what = int(rng.integers(3))
        if what == 0:
            yield text[:i] + text[i + 1 :]
        elif what == 1:
            yield text[:i] + text[i] + text[i:]
        else:
            yield text[:i] + alphabet[int(rng.integers(len(alphabet)))] + text[i + 1 :]


BASES = {
    "trees.nwk": (
        "[&R] ('Vexa minor':0.5,(Quill_pod:1e-1,'it''s':2)0.9:0.25)[&x=1]:0;\n"
        "[&R] ((b:1,c:1):1,(d:1,e:1,f:1):1);\n"
    ),
    "trees.nex": (
        "#NEXUS\nBEGIN TAXA;\n DIMENSIONS NTAX=4;\n TAXLABELS a 'b c' d e;\nEND;\n"
        "BEGIN TREES;\n TRANSLATE 1 a, 2 'b c', 3 d, 4 e;\n"
        " TREE s1 = [&R] ((1:0.5,2:0.5):0.5,(3:1,4:1):0);\n"
        " TREE s2 [&lnP=-3] = [&R] ((1:1,3:1):1,2:2,4:2);\nEND;\n"
    ),
}


@pytest.mark.parametrize("chunk", [newick.CHUNK, 16])
@pytest.mark.parametrize("name", list(BASES))
def test_every_small_mutation_is_read_as_dendropy_reads_it_or_left_to_it(
    tmp_path, monkeypatch, name, chunk
):
    """Random one-character edits of a small file: where DendroPy's path stops with a message
    the fast reader must not handle the file; where it reads it, the fast reader either leaves
    it to DendroPy or gives the same arrays."""
    monkeypatch.setattr(newick, "CHUNK", chunk)
    rng = np.random.default_rng(7)
    counts = {"same": 0, "left": 0}
    for k, text in enumerate(_mutations(rng, BASES[name], 400)):
        path = write(tmp_path, f"{k}_{name}", text)
        expected = dendropy_message(path)
        fast = handled(path)
        assert not (fast and expected is not None), (text, expected)
        if fast:
            assert_same_trees(read_trees(path), read_trees(path, fast=False))
        counts["same" if fast else "left"] += 1
    assert counts["same"] >= 50 and counts["left"] >= 50, counts  # both paths exercised

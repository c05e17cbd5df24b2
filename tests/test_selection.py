"""RFC 3797 draws and canonical frames (service/selection.py) against outside references."""
import hashlib
import itertools
import math
import shutil
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from service.selection import (MAX_REF_CHARS, SelectionInputError,
                               canonical_frame, draw, frame_from_text, key_string, pick,
                               seed_key, selection_digest)

# RFC 3797 section 6 (Eastlake 2004), "Fully Worked Example": the three sources 9319;
# 2 5 12 8 10; 9 18 26 34 41 45 give this key string, and a pool of 25 gives these ten
# selections in this order.
RFC_KEY = "9319./2.5.8.10.12./9.18.26.34.41.45./"
RFC_SELECTIONS = [17, 7, 2, 16, 25, 23, 8, 24, 19, 13]


def test_rfc3797_worked_example_key_string():
    # RFC 3797 section 6: the lottery values of the second source are sorted (12 moves after 10)
    assert seed_key("9319 / 2 5 12 8 10 / 9 18 26 34 41 45") == RFC_KEY
    # already in key form, a seed gives itself back (periods and slashes are separators)
    assert seed_key(RFC_KEY) == RFC_KEY


def test_rfc3797_worked_example_selections():
    assert pick(RFC_KEY, 25, 10) == RFC_SELECTIONS          # RFC 3797 section 6


def test_rfc3797_worked_example_first_digests():
    # RFC 3797 section 6 lists the MD5 of each index-key-index string; the first two:
    assert selection_digest(RFC_KEY, 0).hex().upper() == "990DD0A5692A029A98B5E01AA28F3459"
    assert selection_digest(RFC_KEY, 1).hex().upper().startswith("3691E55CB63FCC37")
    # and by hand with hashlib: two-byte big-endian index on both sides of the ASCII key
    assert selection_digest(RFC_KEY, 258) == hashlib.md5(
        b"\x01\x02" + RFC_KEY.encode() + b"\x01\x02").digest()


def test_pick_by_hand_matches_the_rfc_steps():
    # RFC 3797 section 4 written out independently: number modulo remaining + 1, remove it
    pool = list(range(1, 26))
    expected = []
    for i in range(10):
        n = int(hashlib.md5(i.to_bytes(2, "big") + RFC_KEY.encode() + i.to_bytes(2, "big"))
                .hexdigest(), 16)
        expected.append(pool.pop(n % len(pool)))
    assert expected == RFC_SELECTIONS


def test_seed_canonical_rules():
    assert seed_key("007, 3; 1") == "1.3.7./"                # numeric: sorted, no leading 0
    assert seed_key("heads tails  / 42") == "HEADS.TAILS./42./"   # text: order kept, upper
    assert seed_key(" 5 / / 6 /") == "5./6./"                 # empty sources are dropped
    for bad in ("", "   ", " / / ", "12-4", "ö", "x" * 1001):
        with pytest.raises(SelectionInputError) as e:
            seed_key(bad)
        assert e.value.field == "seed"


def test_key_string_appends_the_frame_hash():
    h = hashlib.sha256(b"A\n").hexdigest()
    assert key_string("1 2", h) == f"1.2./{h}./"
    with pytest.raises(SelectionInputError):
        key_string("1 2", "ABC")


def test_canonical_frame_by_hand():
    frame = canonical_frame(["  P-10 ", "P-2", "\u00c5-1", "P-10", "B-7", "P-2", "p-1"])
    # sorted by code point: upper case before lower case, 'Å' (U+00C5) after ASCII
    assert frame.units == ("B-7", "P-10", "P-2", "p-1", "\u00c5-1")
    assert frame.duplicates == ("P-10", "P-2")
    text = "B-7\nP-10\nP-2\np-1\n\u00c5-1\n"
    assert frame.text == text
    assert frame.sha256 == hashlib.sha256(text.encode("utf-8")).hexdigest()
    # outside check: coreutils `printf 'abc\n' | sha256sum` prints this hash
    assert canonical_frame(["abc"]).sha256 == \
        "edeaaff3f1774ad2888673770c6d64097e391bc362d7d6fb34982ddf0efd18cb"


@pytest.mark.parametrize("refs,where", [
    ([], None), (["A", "  "], 1), (["A", "x" * (MAX_REF_CHARS + 1)], 1),
    (["A", "B", "C\tD"], 2), (["A\u2028B"], 0), ([3], 0)])
def test_bad_frames_name_the_index(refs, where):
    with pytest.raises(SelectionInputError) as e:
        canonical_frame(refs)
    assert e.value.field == "units"
    assert e.value.index == where
    if where is not None:
        assert f"index {where}" in str(e.value)


def test_a_ref_of_exactly_the_limit_is_kept():
    assert canonical_frame(["x" * MAX_REF_CHARS]).size == 1


def test_frame_files_plain_and_csv():
    plain = frame_from_text("\ufeffP-2\r\n\r\nP-1\nP-2\n")
    assert plain.units == ("P-1", "P-2") and plain.duplicates == ("P-2",)
    csv_frame = frame_from_text('site,unit_ref\nNorth,"S-1, left"\nNorth,S-2\n')
    assert csv_frame.units == ("S-1, left", "S-2")
    with pytest.raises(SelectionInputError) as e:
        frame_from_text("A\nB\n\nC\x07\n")
    assert "line 4" in str(e.value) and e.value.field == "file"
    with pytest.raises(SelectionInputError) as e:    # over the csv module's field limit
        frame_from_text('unit_ref\nA\n"' + "x" * 200_000 + '"\n')
    assert e.value.field == "file" and "CSV" in str(e.value)


def test_draw_bad_size():
    frame = canonical_frame(["A", "B", "C"])
    for size in (0, 4):
        with pytest.raises(SelectionInputError) as e:
            draw(frame, "1 2 3", size)
        assert e.value.field == "size"
    with pytest.raises(SelectionInputError) as e:
        draw(frame, " ", 1)
    assert e.value.field == "seed"


refs = st.lists(st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cc", "Cs",
                                                                                   "Zl", "Zp")),
                        min_size=1, max_size=12).filter(lambda s: s.strip()),
                min_size=1, max_size=40)


@settings(max_examples=150, deadline=None)
@given(refs=refs, seed=st.integers(0, 10**9), data=st.data())
def test_draw_properties(refs, seed, data):
    frame = canonical_frame(refs)
    size = data.draw(st.integers(1, frame.size))
    result = draw(frame, str(seed), size)
    assert len(set(result.units)) == size                      # distinct
    assert set(result.units) <= {r.strip() for r in refs}      # all from the frame
    shuffled = data.draw(st.permutations(refs))
    assert draw(shuffled, str(seed), size) == result           # input order does not matter
    assert [frame.units[p - 1] for p in result.positions] == list(result.units)


@settings(max_examples=100, deadline=None)
@given(pool=st.integers(1, 60), data=st.data(), key=st.text(alphabet="0123456789./", max_size=30))
def test_pick_prefix_property(pool, data, key):
    # a longer draw starts with the shorter one: selection i never depends on later ones
    k = data.draw(st.integers(1, pool))
    full = pick(key, pool, pool)
    assert sorted(full) == list(range(1, pool + 1))
    assert pick(key, pool, k) == full[:k]


@pytest.mark.slow
def test_positions_are_uniform_chi_square():
    """Seeded simulation: draws with many seeds put each ordered pair equally often.

    Pool 6, two selections: 30 ordered pairs, each of probability 1/30 under uniform
    sampling without replacement. 30,000 draws with seeds from numpy's default_rng(13);
    Pearson's chi-square (scipy.stats.chisquare, 29 degrees of freedom). Tolerance: the test
    fails when p < 0.001, a false alarm rate of 1 in 1000 for a correct method; the seeds
    are fixed, so the outcome is reproducible. The modulo bias of a 128-bit number mod 6 is
    below 2**-125 and cannot show at this sample size.
    """
    rng = np.random.default_rng(13)
    frame = canonical_frame([f"U-{i}" for i in range(6)])
    counts = dict.fromkeys(itertools.permutations(range(1, 7), 2), 0)
    for seed in rng.integers(0, 10**12, size=30_000):
        counts[draw(frame, str(seed), 2).positions] += 1
    res = stats.chisquare(list(counts.values()))
    assert res.pvalue > 0.001, res
    # each position is included with probability 2/6 (closed form for simple random
    # sampling); 60,000 inclusions over 6 positions -> 10,000 each, sd sqrt(n p (1-p)) ~ 82;
    # tolerance 5 sd
    inclusion = np.zeros(7)
    for pair, c in counts.items():
        for p in pair:
            inclusion[p] += c
    assert np.all(np.abs(inclusion[1:] - 10_000) < 5 * math.sqrt(30_000 * (1 / 3) * (2 / 3)))


@pytest.mark.slow
def test_first_selection_uniform_on_a_large_pool():
    """Seeded simulation: the first selection from a pool of 97 over 48,500 seeds.

    Expected 500 per position; chi-square with 96 degrees of freedom, fail when p < 0.001.
    """
    rng = np.random.default_rng(3797)
    counts = np.zeros(97, dtype=int)
    for seed in rng.integers(0, 2**62, size=48_500):
        counts[pick(seed_key(str(seed)), 97, 1)[0] - 1] += 1
    assert stats.chisquare(counts).pvalue > 0.001


def _cli(*args):
    exe = shutil.which("seqaudit")
    cmd = [exe, *args] if exe else [sys.executable, "-m", "service.cli", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def test_cli_pick_prints_the_rfc_example():
    out = _cli("draw", "pick", "--key", RFC_KEY, "--pool", "25", "--size", "10")
    assert out.returncode == 0, out.stderr
    assert [int(x) for x in out.stdout.split()] == RFC_SELECTIONS     # RFC 3797 section 6


def test_cli_verify_recomputes_a_draw(tmp_path):
    units = [f"PUMP-{i:03d}" for i in range(40)]
    f = tmp_path / "frame.txt"
    f.write_text("\n".join(reversed(units)) + "\nPUMP-007\n", encoding="utf-8")
    out = _cli("draw", "verify", "--frame", str(f), "--seed", "4 8 15 / 16 23 42", "--size", "5")
    assert out.returncode == 0, out.stderr
    expected = draw(units, "4 8 15 / 16 23 42", 5)
    lines = out.stdout.splitlines()
    assert f"key: {expected.key}" in lines
    assert "duplicates counted once: 1 (PUMP-007)" in lines
    rows = [ln.split("\t") for ln in lines[lines.index("order\tposition\tunit_ref") + 1:]]
    assert [r[2] for r in rows] == list(expected.units)
    assert [int(r[1]) for r in rows] == list(expected.positions)
    # the key's hash is the frame's canonical text's SHA-256, computed here by hand
    canon = "".join(u + "\n" for u in sorted(units)).encode()
    assert expected.key.endswith(hashlib.sha256(canon).hexdigest() + "./")


@pytest.mark.parametrize("args,needle", [
    (("verify", "--seed", " ", "--size", "2"), "argument --seed"),
    (("verify", "--seed", "1", "--size", "99"), "argument --size"),
    (("pick", "--key", "x", "--pool", "3", "--size", "4"), "argument --size"),
    (("pick", "--key", "x", "--pool", "3", "--size", "0"), "argument --size"),
])
def test_cli_bad_input(tmp_path, args, needle):
    f = tmp_path / "frame.txt"
    f.write_text("A\nB\nC\n", encoding="utf-8")
    if args[0] == "verify":
        args = (*args, "--frame", str(f))
    out = _cli("draw", *args)
    assert out.returncode == 2
    assert needle in out.stderr
    assert out.stdout == ""


def test_cli_bad_frame_file(tmp_path):
    f = tmp_path / "frame.txt"
    f.write_text("A\n\nB\x01\n", encoding="utf-8")
    out = _cli("draw", "verify", "--frame", str(f), "--seed", "1", "--size", "1")
    assert out.returncode == 2 and "argument --frame" in out.stderr and "line 3" in out.stderr
    out = _cli("draw", "verify", "--frame", str(tmp_path / "none.txt"), "--seed", "1",
               "--size", "1")
    assert out.returncode == 2 and "argument --frame" in out.stderr


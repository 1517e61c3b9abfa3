"""sprig's SentencePiece tokenizer against the SentencePiece library, token for token.

Trains small models with the library (Debian's python3-sentencepiece): BPE and unigram, each
with and without byte fallback, one with user-defined symbols and NFKC with case folding, one
with the identity normalization and no whitespace clean-up, one with whitespace as a suffix,
one with NMT-NFKC and case folding, one without the dummy prefix and with a control symbol.
The training text is the licence texts every Debian system ships in /usr/share/common-licenses
(GPL-3, Apache-2.0, LGPL-2.1, MPL-2.0, GFDL-1.3); other licences there give held-out lines.
Then, per model, sprig_tokenizer_check (tests/tokenizer_check.cc) encodes and decodes:

  (a) held-out lines of the licences GPL-2, GPL-1, LGPL-2, MPL-1.1, Artistic, BSD, CC0-1.0;
  (b) held-out lines of the sample corpus (samples/lm/corpus.py, split as train_lm.py does);
  (c) awkward strings, and invalid UTF-8 given as bytes (the library's Python binding takes
      bytes);
  (d) decodes of random id sequences, and of random byte-piece runs.

Ids and decoded text must be identical; every difference is printed and fails the test.

    python3 tests/python/tokenizer_agreement.py build/bin/sprig_tokenizer_check
"""

import os
import random
import subprocess
import sys
import tempfile

import sentencepiece as spm

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
sys.path.insert(0, os.path.join(ROOT, "samples", "lm"))
import corpus  # noqa: E402  (samples/lm/corpus.py)

LICENCES = "/usr/share/common-licenses"
TRAIN_LICENCES = ["GPL-3", "Apache-2.0", "LGPL-2.1", "MPL-2.0", "GFDL-1.3"]
HELD_OUT_LICENCES = ["GPL-2", "GPL-1", "LGPL-2", "MPL-1.1", "Artistic", "BSD", "CC0-1.0"]

USER_SYMBOLS = ["<sep>", "foo", "ＡＢ", "▁bar"]

# name: trainer options beyond the common ones.
MODELS = {
    "bpe": dict(model_type="bpe"),
    "bpe_bytes": dict(model_type="bpe", byte_fallback=True),
    "unigram": dict(model_type="unigram"),
    "unigram_bytes": dict(model_type="unigram", byte_fallback=True),
    "unigram_user_nfkc_cf": dict(model_type="unigram", user_defined_symbols=USER_SYMBOLS,
                                 normalization_rule_name="nfkc_cf"),
    "bpe_user_identity": dict(model_type="bpe", user_defined_symbols=USER_SYMBOLS,
                              normalization_rule_name="identity", add_dummy_prefix=False,
                              remove_extra_whitespaces=False, byte_fallback=True),
    "bpe_suffix": dict(model_type="bpe", treat_whitespace_as_suffix=True, byte_fallback=True),
    "bpe_nmt_nfkc_cf": dict(model_type="bpe", normalization_rule_name="nmt_nfkc_cf"),
    "unigram_no_dummy": dict(model_type="unigram", add_dummy_prefix=False,
                             control_symbols=["<ctl>"], unk_surface="<?>"),
}

AWKWARD = [
    "", " ", "   ", "\t", "\n", "\r\n", "a\tb\nc", "  leading spaces", "trailing spaces   ",
    "many    spaces   inside  ", " \t \n mixed \t whitespace \n ",
    "\u00a0non-breaking\u00a0spaces\u00a0", "\u00a0", "a\u00a0\u00a0b", "\u3000ideographic\u3000space",
    "\u2009thin\u200bzero\u200dwidth\ufeff", "x" * 3000, "supercalifragilistic" * 120,
    "Pneumonoultramicroscopicsilicovolcanoconiosis", "😀🎉👍🏽 emoji 👨‍👩‍👧‍👦 family",
    "e\u0301 combining a\u0308\u0301 marks \u0301 alone", "ｆｕｌｌ－ｗｉｄｔｈ ＡＢＣ １２３！",
    "ﬁ ligature ① circled ㍿ square", "<s>", "</s>", "<unk>", "<pad>", "<0x41>", "<ctl>",
    "<s> text </s>", "▁", "▁▁ lower one eighth ▁", "<sep>foo<sep>", "ＡＢ ab Ab ＡＢＣ", "foofoo",
    "▁bar bar", "日本語のテキストと漢字", "Привет, мир", "مرحبا بالعالم", "한국어 문장", "Ελληνικά",
    "tab\tinside\tand\ttabs", "\x00\x01\x02 control \x7f", "literal \ufffd replacement",
    "GNU General Public License", "THE SOFTWARE IS PROVIDED \"AS IS\"", "$%^&*()_+{}|:<>?~`",
    "\U0001F600" * 50, "a" * 10 + " " * 10 + "b" * 10,
]

INVALID_UTF8 = [
    b"\xff", b"\xc3", b"abc\xe2\x82", b"\xe2\x82abc", b"\xed\xa0\x80 surrogate",
    b"\xc0\xaf overlong", b"\xf4\x90\x80\x80 too high", b"\xf0\x9f\x98 cut emoji",
    b"\x80\x81\x82 stray continuations", b"mixed \xff valid \xc3\xa9 \xfe\xfe end\xe2",
    b"\xf8\x88\x80\x80\x80", b" \xff ", b"\xef\xbb\xbf bom",
]


def lines_of(names):
    out = []
    for name in names:
        with open(os.path.join(LICENCES, name), encoding="utf-8") as f:
            out.extend(line.rstrip("\n") for line in f)
    return [line for line in out if line.strip()]


def sample_corpus_held_out():
    # As samples/lm/train_lm.py's split_corpus: the last tenth of the default corpus.
    text = corpus.generate(1, 20000).splitlines()
    held_out = text[len(text) * 9 // 10:]
    return held_out[:400]


def train(folder, name, options, training_file):
    prefix = os.path.join(folder, name)
    spm.SentencePieceTrainer.train(
        input=training_file, model_prefix=prefix, vocab_size=500, minloglevel=2,
        input_sentence_size=20000, num_threads=1, **options)
    return prefix + ".model"


def run(check, model, mode, lines, folder):
    path = os.path.join(folder, "input.txt")
    with open(path, "w") as f:
        f.write("".join(line + "\n" for line in lines))
    result = subprocess.run([check, model, mode, path], capture_output=True, text=True)
    if result.returncode != 0:
        sys.exit(f"sprig_tokenizer_check failed on {model} ({mode}): {result.stderr.strip()}")
    return result.stdout.splitlines()


def random_id_sequences(processor, rng):
    size = processor.get_piece_size()
    byte_ids = [i for i in range(size) if processor.is_byte(i)]
    sequences = [[rng.randrange(size) for _ in range(rng.randrange(0, 30))] for _ in range(300)]
    sequences.append([])
    if byte_ids:
        # Runs of byte pieces: valid characters, cut ones, and random bytes, between pieces.
        for _ in range(300):
            text = "".join(rng.choice("aé€😀▁ ") for _ in range(rng.randrange(1, 6))).encode()
            data = bytearray(text)
            for _ in range(rng.randrange(0, 3)):
                data.insert(rng.randrange(len(data) + 1), rng.randrange(256))
            if rng.random() < 0.3:
                data = data[:rng.randrange(len(data) + 1)]
            ids = [processor.piece_to_id("<0x%02X>" % b) for b in data]
            if rng.random() < 0.5:
                ids.insert(rng.randrange(len(ids) + 1), rng.randrange(size))
            sequences.append(ids)
    return sequences


def compare_encode(processor, check, model, texts, folder, report):
    got = run(check, model, "encode", [t.hex() for t in texts], folder)
    differences = 0
    for text, line in zip(texts, got):
        ids_text, decoded_hex = line.split("\t")
        ids = [int(x) for x in ids_text.split()]
        want_ids = processor.encode(text)
        want_text = processor.decode(want_ids).encode("utf-8")
        if ids != want_ids or bytes.fromhex(decoded_hex) != want_text:
            differences += 1
            if differences <= 5:
                report.append(f"  encode {text[:60]!r}: sprig {ids[:20]} {bytes.fromhex(decoded_hex)[:60]!r}, "
                              f"sentencepiece {want_ids[:20]} {want_text[:60]!r}")
    return len(texts), differences + abs(len(got) - len(texts))


def compare_decode(processor, check, model, sequences, folder, report):
    got = run(check, model, "decode", [" ".join(map(str, s)) for s in sequences], folder)
    differences = 0
    for ids, line in zip(sequences, got):
        want = processor.decode(ids).encode("utf-8")
        if bytes.fromhex(line) != want:
            differences += 1
            if differences <= 5:
                report.append(f"  decode {ids[:20]}: sprig {bytes.fromhex(line)[:60]!r}, "
                              f"sentencepiece {want[:60]!r}")
    return len(sequences), differences + abs(len(got) - len(sequences))


def main():
    check = sys.argv[1]
    rng = random.Random(17)
    held_out = [t.encode() for t in lines_of(HELD_OUT_LICENCES)]
    sample = [t.encode() for t in sample_corpus_held_out()]
    awkward = [t.encode() for t in AWKWARD] + INVALID_UTF8
    failures = 0
    with tempfile.TemporaryDirectory() as folder:
        training_file = os.path.join(folder, "train.txt")
        with open(training_file, "w", encoding="utf-8") as f:
            f.write("\n".join(lines_of(TRAIN_LICENCES)) + "\n")
        print("texts compared / differences, per model and kind of text")
        print(f"{'model':24} {'(a) held-out':>14} {'(b) sample':>14} {'(c) awkward':>14} "
              f"{'(d) decode':>14}")
        for name, options in MODELS.items():
            model = train(folder, name, options, training_file)
            processor = spm.SentencePieceProcessor(model_file=model)
            report = []
            cells = [compare_encode(processor, check, model, texts, folder, report)
                     for texts in (held_out, sample, awkward)]
            cells.append(compare_decode(processor, check, model,
                                        random_id_sequences(processor, rng), folder, report))
            print(f"{name:24} " + " ".join(f"{f'{n} / {d}':>14}" for n, d in cells))
            for line in report:
                print(line)
            failures += sum(d for _, d in cells)
    print(f"{failures} differences")
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()

"""Trains the subword sample language model on the orchard logbook corpus and exports it for sprig.

The same corpus and split as train_lm.py (its split_corpus: the first 90% of the lines train,
the last 10% are held out), but tokens are SentencePiece pieces instead of bytes:

1. A SentencePiece BPE model of 1024 pieces is trained on the training lines only
   (SentencePieceTrainer, one thread, deterministic). BPE rather than unigram: the corpus has
   fewer than 600 distinct words, and on it the unigram trainer stops near 700 pieces and
   segments the held-out text into twice as many tokens (0.45 a byte against BPE's 0.22);
   BPE at 1024 keeps every word and most day numbers whole. byte_fallback turns any character
   outside the vocabulary into its UTF-8 bytes (the newline between entries is one of them),
   the identity normalizer, no dummy prefix and no whitespace folding make decoding give back
   exactly the text that was encoded, so the corpus is tokenized as one string.
2. A routed transformer on those tokens, trained with train_lm.py's recipe (its `train`: AdamW,
   warm-up then cosine decay, the hardening and balance terms): 4 pre-norm blocks, d_model
   128, 4 heads, learned positions, a context of 128 tokens, tied embeddings; each block's
   feed-forward a leaf tree of depth 3 (8 leaves of 64 units).

Writes, under --out (default: samples/lm/subword): vell-notes.model (the SentencePiece model),
config.json, weights.npz and reference.npz (sprig_torch.export, two held-out sequences as
reference inputs) and results.json: held-out loss in nats per token and in bits per byte (all
held-out tokens, in consecutive windows of 128, soft and hard routing), and the byte model's
(samples/lm/tree) bits per byte scored the same way on the same text, for comparison.

    PYTHONPATH=converter/python /usr/bin/python3 samples/lm/train_subword.py

PyTorch on the CPU (Debian python3-torch) and Debian python3-sentencepiece; seeded, so a run
with the same thread count on the same machine repeats.
"""

import argparse
import copy
import json
import math
import os
import sys
import time

import numpy as np
import sentencepiece as spm
import torch
import torch.nn.functional as F

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from train_lm import (CONTEXT, HARDEN, init_model, leaf_usage, split_corpus, train,  # noqa: E402
                      windows)
from sprig_torch.export import export, load_weights  # noqa: E402

TOKENIZER_FILE = "vell-notes.model"
PIECES = 1024


def subword_config(vocab_size):
    return {
        "family": "transformer", "name": "vell-notes-subword",
        "description": "subword model of orchard logbook notes (SentencePiece BPE, "
        f"{vocab_size} pieces); leaf-tree feed-forward blocks. Sample model: its text is "
        "often wrong.",
        "tokenizer": "sentencepiece", "vocab_size": vocab_size, "d_model": 128, "n_heads": 4,
        "max_seq": CONTEXT, "norm": "layernorm", "positions": "learned",
        "tie_embeddings": True, "head": {"kind": "lm"},
        "layers": [{"kind": "tree", "mode": "leaf", "depth": 3, "leaf_width": 64,
                    "activation": "gelu"}] * 4,
    }


def train_tokenizer(train_text, pieces, path):
    """Trains the SentencePiece model on the training lines and writes it to `path`."""
    with open(path, "wb") as model:
        spm.SentencePieceTrainer.train(
            sentence_iterator=iter(train_text.splitlines()), model_writer=model,
            model_type="bpe", vocab_size=pieces, character_coverage=1.0, byte_fallback=True,
            normalization_rule_name="identity", add_dummy_prefix=False,
            remove_extra_whitespaces=False, unk_id=0, bos_id=-1, eos_id=-1, pad_id=-1,
            num_threads=1, minloglevel=2)
    return spm.SentencePieceProcessor(model_file=path)


def tokenize(sp, text):
    ids = sp.encode(text)
    if sp.decode(ids) != text:
        raise ValueError("the tokenizer does not give the text back; check its options")
    return np.asarray(ids, dtype=np.int32)


def score(model, tokens, hard, batch=16):
    """Total cross-entropy in nats of every token after the first, predicted in consecutive
    windows of CONTEXT tokens (window k reads tokens [k*CONTEXT, (k+1)*CONTEXT) and predicts
    each one's next token), and the number of tokens predicted."""
    tokens = torch.from_numpy(tokens.astype(np.int64))
    predicted = len(tokens) - 1
    full = predicted // CONTEXT
    x = tokens[:full * CONTEXT].reshape(full, CONTEXT)
    y = tokens[1:full * CONTEXT + 1].reshape(full, CONTEXT)
    pieces = [(x[i:i + batch], y[i:i + batch]) for i in range(0, full, batch)]
    if predicted > full * CONTEXT:
        pieces.append((tokens[None, full * CONTEXT:predicted], tokens[None, full * CONTEXT + 1:]))
    total = 0.0
    with torch.no_grad():
        for xs, ys in pieces:
            logits = model(xs, hard=hard).double()
            total += float(F.cross_entropy(logits.reshape(-1, logits.shape[-1]), ys.reshape(-1),
                                           reduction="sum"))
    return total, predicted


def bits_per_byte(nats, predicted_bytes):
    return nats / math.log(2) / predicted_bytes


def main(argv=None):
    here = os.path.dirname(os.path.abspath(__file__))
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out", default=os.path.join(here, "subword"),
                        help="directory to write (default: %(default)s)")
    parser.add_argument("--byte-model", default=os.path.join(here, "tree"),
                        help="the byte model to compare with, as train_lm.py wrote it "
                        "(default: %(default)s); 'none' to skip")
    parser.add_argument("--pieces", type=int, default=PIECES, help="SentencePiece vocabulary")
    parser.add_argument("--steps", type=int, default=3500)
    parser.add_argument("--batch", type=int, default=16)
    parser.add_argument("--lines", type=int, default=20000, help="corpus lines")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--threads", type=int, default=1)
    args = parser.parse_args(argv)
    torch.set_num_threads(args.threads)
    os.makedirs(args.out, exist_ok=True)
    began = time.time()

    train_bytes, held_out_bytes = split_corpus(args.seed, args.lines)
    train_text = train_bytes.tobytes().decode("utf-8")
    held_out_text = held_out_bytes.tobytes().decode("utf-8")
    sp = train_tokenizer(train_text, args.pieces, os.path.join(args.out, TOKENIZER_FILE))
    train_data, held_out = tokenize(sp, train_text), tokenize(sp, held_out_text)
    config = subword_config(sp.get_piece_size())
    # Bits per byte count the bytes of the predicted tokens: all but the first token's.
    predicted_bytes = len(held_out_bytes) - len(sp.decode(held_out[:1].tolist()).encode())
    results = {
        "tokenizer": {"file": TOKENIZER_FILE, "model_type": "bpe", "pieces": sp.get_piece_size(),
                      "byte_fallback": True},
        "corpus_bytes": {"train": int(len(train_bytes)), "held_out": int(len(held_out_bytes))},
        "corpus_tokens": {"train": int(len(train_data)), "held_out": int(len(held_out))},
        "tokens_per_byte_held_out": len(held_out) / len(held_out_bytes),
        "steps": args.steps, "batch": args.batch, "context": CONTEXT, "threads": args.threads,
    }
    print(f"tokenizer: {sp.get_piece_size()} pieces, {len(train_data)} training tokens, "
          f"{results['tokens_per_byte_held_out']:.4f} held-out tokens per byte", file=sys.stderr)

    gen = torch.Generator().manual_seed(args.seed + 100)
    reference_inputs = windows(held_out, 2, gen)[0].numpy()
    start = time.time()
    print("training subword", file=sys.stderr)
    model = train(init_model(config, args.seed), train_data, args.steps, args.batch, args.seed,
                  HARDEN)
    results["train_seconds"] = round(time.time() - start, 1)

    start = time.time()
    held = {"tokens_scored": None, "bytes_scored": predicted_bytes}
    for form, hard in (("soft", False), ("hard", True)):
        nats, count = score(model, held_out, hard)
        held["tokens_scored"] = count
        held[f"nats_per_token_{form}"] = nats / count
        held[f"bits_per_byte_{form}"] = bits_per_byte(nats, predicted_bytes)
    results["held_out"] = held
    results["leaf_tokens_per_block"] = leaf_usage(model, held_out, args.seed)

    if args.byte_model != "none":
        # The byte model scored the same way on the same held-out text (a byte is a token).
        with open(os.path.join(args.byte_model, "config.json"), encoding="utf-8") as f:
            byte_config = json.load(f)
        with np.load(os.path.join(args.byte_model, "weights.npz")) as w:
            byte_model = load_weights(byte_config, {k: w[k] for k in w.files})
        nats, count = score(byte_model, held_out_bytes, True)
        results["byte_model"] = {"name": byte_config["name"], "bytes_scored": count,
                                 "nats_per_byte_hard": nats / count,
                                 "bits_per_byte_hard": bits_per_byte(nats, count)}
        summary = os.path.join(os.path.dirname(os.path.abspath(args.byte_model)),
                               "results.json")
        if os.path.exists(summary):
            with open(summary, encoding="utf-8") as f:
                sampled = json.load(f)["tree"]["held_out_loss_hard"]
            # train_lm.py's own figure: 256 random held-out windows, nats per byte.
            results["byte_model"]["bits_per_byte_hard_train_lm_windows"] = sampled / math.log(2)
    results["evaluation_seconds"] = round(time.time() - start, 1)

    export(model, args.out, reference_inputs, config=copy.deepcopy(config))
    results["total_seconds"] = round(time.time() - began, 1)
    with open(os.path.join(args.out, "results.json"), "w", encoding="utf-8") as f:
        json.dump(results, f, indent=2)
        f.write("\n")
    print(json.dumps(results, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())

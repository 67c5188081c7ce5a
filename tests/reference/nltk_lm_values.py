#!/usr/bin/env python3
"""Compute reference values for tracewalk's smoothing tests using NLTK's nltk.lm.

Run once (needs `pip install nltk`) from the repository root:

    python3 tests/reference/nltk_lm_values.py

It writes tests/reference/nltk_lm_values.json next to this script. The Rust
tests read that JSON only; they never need Python.

The training corpus below is invented for this purpose (sessions of a fictional
device protocol). The padding convention is tracewalk's own and is reproduced by
`sentence_ngrams` (NLTK's `padded_everygram_pipeline` is deliberately NOT used:
it pads the right side with N-1 `</s>` symbols, we pad with exactly one).
"""

import datetime
import json
import math
import os
import platform
import sys

import nltk
from nltk.lm import KneserNeyInterpolated, Vocabulary, WittenBellInterpolated

BOS = "<s>"
EOS = "</s>"
KN_DISCOUNT = 0.1

# Invented sessions of a fictional device protocol. Chosen so that several
# contexts have more than one successor and several n-grams repeat (so that
# discounting and continuation counts matter).
TRAINING_SENTENCES = [
    ["HELLO", "AUTH", "SET", "GET", "BYE"],
    ["HELLO", "AUTH", "GET", "GET", "BYE"],
    ["HELLO", "AUTH", "SET", "ACK", "GET", "BYE"],
    ["HELLO", "PING", "ACK", "BYE"],
    ["HELLO", "AUTH", "ERR", "AUTH", "SET", "ACK", "BYE"],
    ["HELLO", "AUTH", "GET", "ACK", "BYE"],
    ["HELLO", "PING", "ACK", "PING", "ACK", "BYE"],
    ["HELLO", "AUTH", "SET", "ACK", "SET", "ACK", "BYE"],
    ["HELLO", "AUTH", "GET", "GET", "GET", "BYE"],
    ["HELLO", "ERR", "BYE"],
    ["HELLO", "AUTH", "SET", "GET", "ACK", "BYE"],
    ["PING", "ACK", "BYE"],
]

PADDING_CONVENTION = (
    "For model order N (n-grams of length N, Markov context length N-1) each "
    "sentence w1..wm is padded with N-1 '<s>' on the left and exactly one '</s>' "
    "on the right. For every predicted position i in 1..m+1 ('</s>' is predicted, "
    "'<s>' never is) the n-grams fed to NLTK are ALL suffixes of the length-N "
    "window ending at position i, of lengths 1..N. Hence unigram counts never "
    "include '<s>', and the bigram ('<s>','HELLO') and, for N=3, the trigram "
    "('<s>','<s>','HELLO') are counted once per sentence starting with HELLO. "
    "nltk.lm.preprocessing.padded_everygram_pipeline is NOT used."
)


def sentence_ngrams(sentence, order):
    """All n-grams (as tuples) that tracewalk's convention feeds for one sentence."""
    padded = [BOS] * (order - 1) + list(sentence) + [EOS]
    out = []
    for i in range(order - 1, len(padded)):  # every predicted position
        window = padded[i - order + 1 : i + 1]
        for length in range(1, order + 1):
            out.append(tuple(window[order - length :]))
    return out


def build_vocab():
    tokens = [t for s in TRAINING_SENTENCES for t in s] + [BOS, EOS]
    return Vocabulary(tokens, unk_cutoff=1)


def build_model(kind, order):
    vocab = build_vocab()
    if kind == "kneser_ney_interpolated":
        lm = KneserNeyInterpolated(order, discount=KN_DISCOUNT, vocabulary=vocab)
        ctor = f"nltk.lm.KneserNeyInterpolated({order}, discount={KN_DISCOUNT!r})"
    elif kind == "witten_bell_interpolated":
        lm = WittenBellInterpolated(order, vocabulary=vocab)
        ctor = f"nltk.lm.WittenBellInterpolated({order})"
    else:
        raise ValueError(kind)
    lm.fit([sentence_ngrams(s, order) for s in TRAINING_SENTENCES])
    return lm, ctor


def raw_count(lm, ngram):
    """Count of an n-gram without creating empty defaultdict entries."""
    ngram = tuple(ngram)
    if len(ngram) == 1:
        return lm.counts.unigrams[ngram[0]]
    cfd = lm.counts[len(ngram)]
    fd = cfd.get(ngram[:-1])
    return fd[ngram[-1]] if fd is not None else 0


def context_seen(lm, ctx):
    fd = lm.counts[len(ctx) + 1].get(tuple(ctx))
    return bool(fd)


# Queries: (category, word, context). Categories are checked by assertions in
# `check_category`, so the labels are guaranteed to describe the data.
QUERIES = {
    3: [
        ("seen_trigram", "ACK", ["AUTH", "SET"]),
        ("seen_trigram", "SET", ["HELLO", "AUTH"]),
        ("seen_trigram", "GET", ["GET", "GET"]),
        ("seen_bigram_unseen_trigram", "SET", ["PING", "ACK"]),
        ("seen_bigram_unseen_trigram", "GET", ["ERR", "AUTH"]),
        ("unseen_ngrams_known_word", "PING", ["AUTH", "SET"]),
        ("unseen_ngrams_known_word", "GET", ["HELLO", "PING"]),
        ("unseen_context", "ACK", ["GET", "SET"]),
        ("unseen_context", "AUTH", ["BYE", "HELLO"]),
        ("unseen_context_all_levels", "HELLO", ["BYE", EOS]),
        ("eos_word_seen_trigram", EOS, ["GET", "BYE"]),
        ("eos_word_seen_trigram", EOS, ["ACK", "BYE"]),
        ("eos_word_unseen_bigram", EOS, ["AUTH", "GET"]),
        ("bos_context_seen_trigram", "HELLO", [BOS, BOS]),
        ("bos_context_seen_trigram", "PING", [BOS, BOS]),
        ("bos_context_seen_trigram", "AUTH", [BOS, "HELLO"]),
        ("bos_context_seen_trigram", "ACK", [BOS, "PING"]),
        ("bos_context_unseen_ngrams_known_word", "GET", [BOS, "HELLO"]),
        ("bos_as_word", BOS, ["HELLO", "AUTH"]),
        ("oov_word", "REBOOT", ["HELLO", "AUTH"]),
    ],
    2: [
        ("seen_bigram", "SET", ["AUTH"]),
        ("seen_bigram", "GET", ["SET"]),
        ("seen_bigram", "GET", ["GET"]),
        ("seen_bigram", "ACK", ["PING"]),
        ("unseen_bigram_known_word", "PING", ["AUTH"]),
        ("unseen_bigram_known_word", "GET", ["HELLO"]),
        ("unseen_context_all_levels", "HELLO", [EOS]),
        ("eos_word_seen_bigram", EOS, ["BYE"]),
        ("eos_word_unseen_bigram", EOS, ["GET"]),
        ("bos_context_seen_bigram", "HELLO", [BOS]),
        ("bos_context_seen_bigram", "PING", [BOS]),
        ("bos_context_unseen_bigram_known_word", "AUTH", [BOS]),
        ("bos_as_word", BOS, ["AUTH"]),
        ("oov_word", "REBOOT", ["HELLO"]),
    ],
}


def check_category(lm, order, category, word, ctx):
    """Assert that the query really belongs to its declared category."""
    full = tuple(ctx) + (word,)
    in_vocab = word in lm.vocab
    if category == "oov_word":
        assert not in_vocab, (category, word)
        return
    assert in_vocab, (category, word)
    if category == "bos_as_word":
        assert lm.counts.unigrams[word] == 0
        return
    assert lm.counts.unigrams[word] > 0, (category, word)
    top = raw_count(lm, full)
    short = raw_count(lm, full[-2:])
    if category in ("unseen_context", "unseen_context_all_levels"):
        assert not context_seen(lm, ctx), (category, ctx)
        if category == "unseen_context_all_levels":
            assert all(not context_seen(lm, ctx[k:]) for k in range(len(ctx)))
        else:
            assert context_seen(lm, ctx[-1:]), (category, ctx)
        return
    assert context_seen(lm, ctx), (category, ctx)
    if "unseen_trigram" in category:
        assert top == 0 and short > 0, (category, full)
    elif "unseen_ngrams" in category or "unseen_bigram" in category:
        assert short == 0 and top == 0, (category, full)
    elif "seen_trigram" in category or "seen_bigram" in category:
        assert top > 0, (category, full)
    else:
        raise AssertionError(f"unknown category {category}")


def query_record(lm, category, word, ctx):
    masked_word = lm.vocab.lookup(word)
    masked_ctx = list(lm.vocab.lookup(ctx))
    score = lm.score(word, ctx)
    levels = []
    for k in range(len(masked_ctx)):
        sub = tuple(masked_ctx[k:])
        lvl = {"context": list(sub)}
        if not context_seen(lm, sub):
            # InterpolatedLanguageModel.unmasked_score uses alpha=0, gamma=1 here.
            lvl["empty"] = True
        else:
            alpha, gamma = lm.estimator.alpha_gamma(masked_word, sub)
            lvl["alpha"] = float(alpha)
            lvl["gamma"] = float(gamma)
        # Interpolated probability of this level (recursing down to unigram_score).
        lvl["unmasked_score"] = float(lm.unmasked_score(masked_word, sub))
        levels.append(lvl)
    unigram = float(lm.estimator.unigram_score(masked_word))

    # Re-derive the score from the decomposition, exactly like NLTK does.
    acc = unigram
    for lvl in reversed(levels):
        if lvl.get("empty"):
            acc = 0 + 1 * acc
        else:
            acc = lvl["alpha"] + lvl["gamma"] * acc
    assert acc == score, (word, ctx, acc, score)

    rec = {
        "category": category,
        "word": word,
        "context": list(ctx),
        "score": float(score),
        "levels": levels,
        "unigram_score": unigram,
    }
    if masked_word != word or masked_ctx != list(ctx):
        rec["masked_word"] = masked_word
        rec["masked_context"] = masked_ctx
    return rec


def ngram_counts_dump(lm, order):
    out = {}
    for n in range(1, order + 1):
        d = {}
        if n == 1:
            for w, c in lm.counts.unigrams.items():
                if c > 0:
                    d[w] = c
        else:
            for ctx, fd in lm.counts[n].items():
                for w, c in fd.items():
                    if c > 0:
                        d[" ".join(ctx + (w,))] = c
        out[str(n)] = dict(sorted(d.items()))
    return out


def check_kn_lower_gamma_equivalence(lm, order):
    """KN lower levels: NLTK's gamma numerator counts distinct successors in the
    RAW counts of the context, while its denominator is a continuation count.
    Check that raw N1+(ctx .) equals continuation N1+(w : N1+(. ctx w) > 0) for
    every lower-order context on this corpus (true under our left padding)."""
    for n in range(2, order):  # n = length of the lower-order n-gram
        for ctx, fd in list(lm.counts[n].items()):
            if not fd:
                continue
            raw = {w for w, c in fd.items() if c > 0}
            cont = set()
            for hctx, hfd in lm.counts[n + 1].items():
                if hctx[1:] == ctx:
                    cont |= {w for w, c in hfd.items() if c > 0}
            assert raw == cont, (ctx, raw, cont)
    return True


def vocab_sum_check(lm, ctx):
    """Sum of score over all vocabulary symbols (incl. <s>, <UNK>) given ctx."""
    return math.fsum(lm.score(w, ctx) for w in sorted(lm.vocab))


NOTES = {
    "score": (
        "LanguageModel.score(word, context) maps OOV word/context symbols to '<UNK>' "
        "via vocab.lookup and calls unmasked_score. InterpolatedLanguageModel."
        "unmasked_score truncates the context to its last order-1 symbols, then: "
        "if the context is empty it RETURNS estimator.unigram_score(word) (the "
        "empty-context level is not interpolated with anything: no uniform 1/|V| "
        "floor, so a word never predicted in training, e.g. '<s>' or '<UNK>', "
        "scores exactly 0); if counts[context] is empty it uses alpha=0, gamma=1 "
        "(pure back-off to context[1:]); otherwise (alpha, gamma) = "
        "estimator.alpha_gamma(word, context) and it returns alpha + gamma * "
        "unmasked_score(word, context[1:])."
    ),
    "kneser_ney": (
        "nltk.lm.smoothing.KneserNey with discount D (one D for all orders). "
        "TOP level (only when len(context)+1 == order, i.e. decided by the "
        "length of the context passed in, not by recursion depth): alpha = "
        "max(c(ctx w) - D, 0) / c(ctx .) using RAW counts. LOWER levels "
        "(1 <= len(ctx) < order-1): alpha = max(N1+(. ctx w) - D, 0) / N1+(. ctx .) "
        "using continuation counts computed from the (len(ctx)+2)-gram table: "
        "N1+(. ctx w) = number of distinct x with c(x ctx w) > 0, N1+(. ctx .) = "
        "sum over x of the number of distinct w with c(x ctx w) > 0. gamma at every "
        "level = D * N1+(ctx .) / denominator, where N1+(ctx .) is the number of "
        "distinct successors of ctx in the RAW counts of ctx (even at lower levels) "
        "and the denominator is the same one used for alpha (c(ctx .) at the top, "
        "N1+(. ctx .) below). On this corpus raw N1+(ctx .) equals the continuation "
        "type count for every lower-order context (checked by the script), so this "
        "matches the published interpolated KN. Base (empty context): "
        "unigram_score(w) = N1+(. w) / N1+(. .) from the bigram table (continuation "
        "unigram, NOT discounted and NOT interpolated with a uniform distribution). "
        "The unigram level never uses raw unigram counts. In an order-2 model the "
        "bigram level is the top level (raw counts)."
    ),
    "witten_bell": (
        "nltk.lm.smoothing.WittenBell: at every non-empty context level, raw counts: "
        "gamma = N1+(ctx .) / (N1+(ctx .) + c(ctx .)), and the RETURNED alpha is "
        "already multiplied: alpha = (1 - gamma) * c(ctx w) / c(ctx .). Base "
        "(empty context): unigram_score(w) = c(w) / sum of unigram counts (MLE on the "
        "unigram table, which here includes '</s>' but never '<s>'); not interpolated "
        "with a uniform distribution. No continuation counts anywhere."
    ),
    "levels_field": (
        "levels[k] is the level whose context is context[k:] (full context first, "
        "one-symbol context last). alpha/gamma are exactly what "
        "lm.estimator.alpha_gamma(word, context[k:]) returns (so for Witten-Bell alpha "
        "already includes the (1-gamma) factor). 'empty': true means "
        "lm.counts[context[k:]] is empty, so NLTK uses alpha=0, gamma=1 and never calls "
        "alpha_gamma. unmasked_score is lm.unmasked_score(word, context[k:]), the "
        "interpolated probability from that level down. score == "
        "levels[0].unmasked_score; the script asserts that folding alpha + gamma * "
        "lower from unigram_score upwards reproduces score bit-for-bit."
    ),
    "normalisation": (
        "For every query context the script asserts that the scores over the whole "
        "vocabulary (including '<s>' and '<UNK>', which score 0) sum to 1 within "
        "1e-12."
    ),
    "ngram_counts": (
        "models[].ngram_counts[n] maps the space-joined n-gram to its count in NLTK's "
        "NgramCounter after fit (zero entries omitted), so a test can check tracewalk's "
        "own counting under the padding convention before checking probabilities. "
        "Orders 1 and 2 are identical for the order-2 and order-3 models."
    ),
    "categories": (
        "queries[].category names what is seen in training; the script asserts each "
        "label against the counts. 'unseen_context' = the full context was never seen "
        "but its one-symbol suffix was; 'unseen_context_all_levels' = no level has data "
        "(pure unigram_score); 'bos_as_word' and 'oov_word' score 0 in NLTK (oov_word is "
        "mapped to '<UNK>', see masked_word/masked_context, present only when lookup "
        "changed something)."
    ),
    "float_precision": (
        "Floats are Python's shortest round-trip repr of NLTK's doubles. NLTK's "
        "operation order (e.g. D * n / N as (D*n)/N, WB alpha as (1-gamma)*(c/N)) can "
        "differ in the last bits from another implementation of the same formula, so "
        "compare with a small tolerance (e.g. 1e-12 absolute/relative), not bit-for-bit."
    ),
    "side_effect": (
        "Indexing lm.counts[ctx] for an unseen ctx inserts an empty FreqDist into the "
        "ConditionalFreqDist (defaultdict); this does not change any value because "
        "all NLTK counts of distinct types skip zero entries."
    ),
}


def to_json(obj, indent=1, level=0):
    """json.dumps with indent, but lists of scalars kept on one line (readability).
    Floats use Python's repr (shortest round-tripping form), as json.dumps does."""
    pad = " " * (indent * (level + 1))
    end = " " * (indent * level)
    if isinstance(obj, dict):
        if not obj:
            return "{}"
        items = [
            pad + json.dumps(k, ensure_ascii=False) + ": " + to_json(v, indent, level + 1)
            for k, v in obj.items()
        ]
        return "{\n" + ",\n".join(items) + "\n" + end + "}"
    if isinstance(obj, list):
        if all(not isinstance(x, (dict, list)) for x in obj):
            return json.dumps(obj, ensure_ascii=False)
        items = [pad + to_json(x, indent, level + 1) for x in obj]
        return "[\n" + ",\n".join(items) + "\n" + end + "]"
    return json.dumps(obj, ensure_ascii=False)


def main():
    models = []
    vocab_size = None
    for order in (3, 2):
        for kind in ("kneser_ney_interpolated", "witten_bell_interpolated"):
            lm, ctor = build_model(kind, order)
            vocab_size = len(lm.vocab)
            if kind == "kneser_ney_interpolated":
                check_kn_lower_gamma_equivalence(lm, order)
            queries = []
            for category, word, ctx in QUERIES[order]:
                check_category(lm, order, category, word, ctx)
                total = vocab_sum_check(lm, ctx)
                assert abs(total - 1.0) < 1e-12, (kind, order, ctx, total)
                queries.append(query_record(lm, category, word, ctx))
            model = {
                "name": f"{kind}_order{order}",
                "kind": kind,
                "order": order,
                "constructor": ctor,
                "vocab_size": len(lm.vocab),
                "queries": queries,
                "ngram_counts": ngram_counts_dump(lm, order),
            }
            if kind == "kneser_ney_interpolated":
                model["discount"] = KN_DISCOUNT
            models.append(model)

    out = {
        "source": f"NLTK {nltk.__version__} nltk.lm, computed by tests/reference/nltk_lm_values.py",
        "nltk_version": nltk.__version__,
        "python_version": platform.python_version(),
        "date": datetime.date.today().isoformat(),
        "bos": BOS,
        "eos": EOS,
        "unk": "<UNK>",
        "padding_convention": PADDING_CONVENTION,
        "vocabulary": (
            "nltk.lm.Vocabulary(all training tokens + ['<s>', '</s>'], unk_cutoff=1); "
            "vocab_size = len(lm.vocab), which includes '<UNK>'"
        ),
        "vocab_size": vocab_size,
        "vocab_symbols": sorted(build_vocab()),
        "training_sentences": TRAINING_SENTENCES,
        "notes": NOTES,
        "models": models,
    }
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "nltk_lm_values.json")
    with open(path, "w", encoding="utf-8") as f:
        f.write(to_json(out))
        f.write("\n")
    # The compact writer must round-trip to exactly the same data.
    with open(path, encoding="utf-8") as f:
        assert json.load(f) == out
    print(f"wrote {path} ({len(models)} models, vocab_size={vocab_size})", file=sys.stderr)


if __name__ == "__main__":
    main()

//! The chain stage checked against references outside the project: a textbook worked example,
//! closed-form results, a statistical test from statrs, and values computed with NLTK.

use rand::SeedableRng;
use rand_xoshiro::Xoshiro256PlusPlus;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use tracewalk::chain::{Chain, ChainConfig, GramCounter, Grams, Parts, Smoothing, stationary};
use tracewalk::symbol::{BEGIN, END};

fn counted(order: usize, seqs: &[Vec<u32>]) -> Grams {
    let mut c = GramCounter::new(order);
    for s in seqs {
        c.add_sequence(s, tracewalk::chain::Part::Fit);
    }
    c.into_grams(|s| s)
}

fn config(smoothing: Smoothing) -> ChainConfig {
    ChainConfig { smoothing, discount: None, parts: Parts::All }
}

// Common practice (definition of the maximum-likelihood estimate of a Markov chain):
// P̂(w | h) = c(h, w) / Σ_v c(h, v), i.e. the row-normalised count matrix.
#[test]
fn maximum_likelihood_is_row_normalised_counts() {
    let seqs: Vec<Vec<u32>> = vec![vec![2, 3, 3, 4, 2, 3], vec![3, 4, 4, 2], vec![2, 2, 3]];
    let chain = Chain::build(&counted(1, &seqs), 5, &config(Smoothing::KneserNey));
    let mut table = [[0u32; 5]; 5];
    for s in &seqs {
        let mut prev = BEGIN;
        for &w in s.iter().chain([END].iter()) {
            table[prev as usize][w as usize] += 1;
            prev = w;
        }
    }
    for h in [BEGIN, 2, 3, 4] {
        let row_total: u32 = table[h as usize].iter().sum();
        for w in 1..5u32 {
            let expected = table[h as usize][w as usize] as f64 / row_total as f64;
            assert!((chain.ml_prob(&[h], w).unwrap() - expected).abs() < 1e-15, "P({w}|{h})");
        }
    }
    assert_eq!(chain.ml_prob(&[1], 2), None, "END never starts a context");
}

// Jurafsky & Martin, "Speech and Language Processing", 3rd ed. draft, ch. 3 (N-gram Language
// Models), Berkeley Restaurant Project: bigram counts (Fig. 3.1), unigram counts and the add-one
// smoothed bigram probabilities (Fig. 3.7), with V = 1446. Figures from memory; every one
// re-derives from (c(h,w)+1)/(c(h)+V), which is what this test checks our add-one chain against.
#[test]
fn add_one_matches_the_textbook_restaurant_example() {
    let words = ["i", "want", "to", "eat", "chinese", "food", "lunch", "spend"];
    let unigram = [2533u64, 927, 2417, 746, 158, 1093, 341, 278];
    let bigrams: [[u64; 8]; 8] = [
        [5, 827, 0, 9, 0, 0, 0, 2],
        [2, 0, 608, 1, 6, 6, 5, 1],
        [2, 0, 4, 686, 2, 0, 6, 211],
        [0, 0, 2, 0, 16, 2, 42, 0],
        [1, 0, 0, 0, 0, 82, 1, 0],
        [15, 0, 15, 0, 1, 4, 0, 0],
        [2, 0, 0, 0, 0, 1, 0, 0],
        [1, 0, 1, 0, 0, 0, 0, 0],
    ];
    // (row, column, rounded book value)
    let book = [
        (0, 0, 0.0015),
        (0, 1, 0.21),
        (1, 2, 0.26),
        (2, 3, 0.18),
        (2, 7, 0.055),
        (3, 6, 0.02),
        (4, 5, 0.052),
        (5, 0, 0.0063),
        (6, 0, 0.0017),
        (7, 0, 0.0012),
        (1, 0, 0.0013),
        (3, 4, 0.0078),
    ];
    // Symbols: 2..=9 the eight words; 10 stands for every other word following h, so that the
    // row totals equal the unigram counts c(h). The alphabet has V = 1446 predictable symbols.
    let other = 10u32;
    let mut counter = GramCounter::new(1);
    for (h, row) in bigrams.iter().enumerate() {
        let h_sym = 2 + h as u32;
        for (w, &c) in row.iter().enumerate() {
            if c > 0 {
                counter.add_gram(&[h_sym, 2 + w as u32], [c, 0]);
            }
        }
        counter.add_gram(&[h_sym, other], [unigram[h] - row.iter().sum::<u64>(), 0]);
    }
    let chain = Chain::build(&counter.into_grams(|s| s), 1447, &config(Smoothing::AddOne));
    for (h, w, expected) in book {
        let p = chain.prob(&[2 + h as u32], 2 + w as u32);
        let exact = (bigrams[h][w] + 1) as f64 / (unigram[h] + 1446) as f64;
        assert!((p - exact).abs() < 1e-15, "{} {}", words[h], words[w]);
        // The book rounds to two significant digits.
        let rel = (p - expected).abs() / expected;
        assert!(rel < 0.05, "P({}|{}) = {p:.5}, book {expected}", words[w], words[h]);
    }
}

/// A long session of a two-state chain with P(A→B) = p and P(B→A) = q.
fn two_state_session(p: f64, q: f64, steps: usize, seed: u64) -> Vec<u32> {
    use rand::RngExt;
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(seed);
    let (a, b) = (2u32, 3u32);
    let mut state = a;
    let mut seq = Vec::with_capacity(steps);
    for _ in 0..steps {
        seq.push(state);
        let u: f64 = rng.random();
        state = match state {
            s if s == a && u < p => b,
            s if s == b && u < q => a,
            s => s,
        };
    }
    seq
}

// Closed form (common textbook result for a two-state chain): the stationary distribution of
// [[1-p, p], [q, 1-q]] is (q/(p+q), p/(p+q)).
#[test]
fn stationary_distribution_of_two_state_chain_matches_closed_form() {
    let (p, q) = (0.3, 0.1);
    let seq = two_state_session(p, q, 200_000, 11);
    let chain = Chain::build(&counted(1, &[seq]), 4, &config(Smoothing::WittenBell));
    // Against the chain's own transition probabilities: exact up to iteration error.
    let ab = chain.prob(&[2], 3) / (chain.prob(&[2], 2) + chain.prob(&[2], 3));
    let ba = chain.prob(&[3], 2) / (chain.prob(&[3], 2) + chain.prob(&[3], 3));
    let pi = stationary(&chain, &[2, 3]);
    assert!((pi[0] - ba / (ab + ba)).abs() < 1e-9, "{pi:?}");
    assert!((pi[1] - ab / (ab + ba)).abs() < 1e-9);
    // Against the true parameters: the learned chain recovers them.
    assert!((pi[0] - q / (p + q)).abs() < 0.01, "{pi:?}");
    // And walks sampled from the learned chain visit states in that proportion.
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(5);
    let (mut prev, mut in_a, mut n) = (2u32, 0u64, 0u64);
    while n < 100_000 {
        let next = chain.sample(&[prev], &mut rng);
        if next == 2 || next == 3 {
            in_a += u64::from(next == 2);
            n += 1;
            prev = next;
        }
    }
    assert!((in_a as f64 / n as f64 - q / (p + q)).abs() < 0.01);
}

// Pearson's chi-squared goodness-of-fit test (Pearson 1900; any statistics textbook): sampled
// next-step frequencies against the chain's probabilities; p-value from statrs' ChiSquared CDF.
// Cells with expected count below 5 are pooled (common practice).
#[test]
fn sampled_next_steps_fit_model_probabilities() {
    let seqs: Vec<Vec<u32>> = (0..60)
        .map(|i| {
            two_state_session(0.2 + (i % 5) as f64 * 0.1, 0.3, 40, i)
                .iter()
                .map(|s| s + (i % 3) as u32)
                .collect()
        })
        .collect();
    for smoothing in [Smoothing::KneserNey, Smoothing::WittenBell] {
        let chain = Chain::build(&counted(2, &seqs), 8, &config(smoothing));
        for (n, history) in [vec![2, 3], vec![3, 3], vec![4, 5], vec![], vec![7, 7]].into_iter().enumerate() {
            let mut rng = Xoshiro256PlusPlus::seed_from_u64(100 + n as u64);
            let draws = 20_000;
            let mut seen = [0u64; 8];
            for _ in 0..draws {
                seen[chain.sample(&history, &mut rng) as usize] += 1;
            }
            let (mut stat, mut cells) = (0.0, 0usize);
            let (mut pooled_obs, mut pooled_exp) = (0.0, 0.0);
            for w in 1..8u32 {
                let expected = chain.prob(&history, w) * draws as f64;
                if expected < 5.0 {
                    pooled_obs += seen[w as usize] as f64;
                    pooled_exp += expected;
                    continue;
                }
                stat += (seen[w as usize] as f64 - expected).powi(2) / expected;
                cells += 1;
            }
            if pooled_exp >= 5.0 {
                stat += (pooled_obs - pooled_exp).powi(2) / pooled_exp;
                cells += 1;
            }
            let df = (cells - 1) as f64;
            let p_value = 1.0 - ChiSquared::new(df).unwrap().cdf(stat);
            assert!(
                p_value > 0.001,
                "{smoothing:?} after {history:?}: X²={stat:.2}, df={df}, p={p_value:.5}"
            );
            assert_eq!(seen[0], 0);
        }
    }
}

// Reference values computed once with NLTK's nltk.lm (KneserNeyInterpolated, discount 0.1, and
// WittenBellInterpolated) by tests/reference/nltk_lm_values.py; provenance in the JSON file.
// NLTK interpolates down to one-word contexts and then uses its own base (KN: the undiscounted
// continuation unigram N1+(•w)/N1+(••); WB: the unigram frequency c(w)/N), whereas our chains
// also interpolate the empty context with a uniform floor. So we compare α and γ at every level
// with a context, the counts behind NLTK's base, and NLTK's full score recomposed from ours.
#[test]
fn smoothing_matches_nltk_reference_values() {
    let text = include_str!("reference/nltk_lm_values.json");
    let doc: serde_json::Value = serde_json::from_str(text).unwrap();
    let sentences: Vec<Vec<String>> = serde_json::from_value(doc["training_sentences"].clone()).unwrap();
    let mut words: Vec<String> = sentences.iter().flatten().cloned().collect();
    words.sort();
    words.dedup();
    let sym = |w: &str| -> u32 {
        match w {
            "<s>" => BEGIN,
            "</s>" => END,
            _ => 2 + words.iter().position(|x| x == w).expect("known word") as u32,
        }
    };
    let seqs: Vec<Vec<u32>> = sentences.iter().map(|s| s.iter().map(|w| sym(w)).collect()).collect();
    let symbols = 2 + words.len() as u32;
    let mut checked = 0;
    for m in doc["models"].as_array().unwrap() {
        let order = m["order"].as_u64().unwrap() as usize - 1;
        let kn = m["kind"].as_str().unwrap().contains("kneser");
        let cfg = if kn {
            ChainConfig {
                smoothing: Smoothing::KneserNey,
                discount: Some(m["discount"].as_f64().unwrap()),
                parts: Parts::All,
            }
        } else {
            config(Smoothing::WittenBell)
        };
        let chain = Chain::build(&counted(order, &seqs), symbols, &cfg);
        for q in m["queries"].as_array().unwrap() {
            let word = q["word"].as_str().unwrap();
            if q.get("masked_word").is_some() || word == "<s>" {
                continue; // out-of-vocabulary and padding words have no counterpart in our chains
            }
            let history: Vec<u32> =
                q["context"].as_array().unwrap().iter().map(|c| sym(c.as_str().unwrap())).collect();
            let w = sym(word);
            let ours = chain.terms(&history, w);
            let mut recomposed_rev = Vec::new();
            for (level, theirs) in q["levels"].as_array().unwrap().iter().enumerate() {
                let term = ours[level];
                assert_eq!(term.context_len, history.len() - level);
                if theirs.get("empty").is_some() {
                    assert!(!term.seen, "{q}: level {level} should be unseen");
                    recomposed_rev.push((0.0, 1.0));
                    continue;
                }
                let (a, g) = (theirs["alpha"].as_f64().unwrap(), theirs["gamma"].as_f64().unwrap());
                assert!((term.alpha - a).abs() < 1e-12, "{} {q}: alpha {} vs {a}", m["name"], term.alpha);
                assert!((term.gamma - g).abs() < 1e-12, "{} {q}: gamma {} vs {g}", m["name"], term.gamma);
                recomposed_rev.push((a, g));
            }
            // NLTK's base from our empty-context level.
            let base = ours[ours.len() - 1];
            let unigram = if kn {
                // α0 = max(N1+(•w) − D, 0)/N1+(••) and γ0 = D·T0/N1+(••), so NLTK's undiscounted
                // N1+(•w)/N1+(••) = α0 + γ0/T0 for a word seen at least once.
                if base.alpha > 0.0 { base.alpha + base.gamma / types_at_empty_context(&chain) } else { 0.0 }
            } else {
                // α0 = c(w)/(N+T), γ0 = T/(N+T): NLTK's c(w)/N = α0/(1−γ0).
                base.alpha / (1.0 - base.gamma)
            };
            let theirs_unigram = q["unigram_score"].as_f64().unwrap();
            assert!(
                (unigram - theirs_unigram).abs() < 1e-12,
                "{} {q}: unigram {unigram} vs {theirs_unigram}",
                m["name"]
            );
            let score = recomposed_rev.iter().rev().fold(unigram, |acc, (a, g)| a + g * acc);
            assert!((score - q["score"].as_f64().unwrap()).abs() < 1e-12, "{} {q}: score {score}", m["name"]);
            checked += 1;
        }
    }
    assert!(checked >= 30, "only {checked} queries checked");
}

/// T0: the number of distinct successors of the empty context.
fn types_at_empty_context(chain: &Chain) -> f64 {
    (1..chain.symbols()).filter(|&w| chain.terms(&[], w).last().unwrap().alpha > 0.0).count() as f64
}

"""The hostile-input corpus: inputs built to hurt, replayed in the suite (test_corpus.py)."""

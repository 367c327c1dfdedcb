"""Recipe for the training corpus of the concept heads (see training/build_corpus.py)."""

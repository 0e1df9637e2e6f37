"""Text in, sparse matrix out: readers for labelled files (folder-per-label trees, CSV/TSV and
JSON Lines) with line-precise errors, the stratified dev split, and the featurizer built on
scikit-learn's vectorizers (word and character n-grams, a vocabulary or a hashed space,
binary/count/log/tf-idf weighting, unit-length rows) with its parallel chunked counting.
This layer knows nothing of training, models, reports or the command line.
"""

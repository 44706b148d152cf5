"""Data layer: trees, treebank files, vocabulary, batch flattening, word vectors."""

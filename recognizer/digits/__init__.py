"""Digits: from a cut box to the model's input, the digit model, its training and its checks."""

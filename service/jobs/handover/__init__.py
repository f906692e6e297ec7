"""Handing results over: the model file, its card, outer predictions and fold-score rows."""

"""Declarative pieces several stages share (not stages themselves: ``relcorr stages`` lists none of these)."""

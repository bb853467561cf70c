"""Analyses of a Run: each kernel, its frame-pass consumer, its request and its frozen result."""

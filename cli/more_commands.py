"""Commands beyond decode and synth."""

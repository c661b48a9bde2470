"""Text to answer: normalise the text, run the cascade of stages, decide, calibrate."""

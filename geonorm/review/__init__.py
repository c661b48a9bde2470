"""People in the loop: the review queue, decisions that stick, accuracy on labelled data."""

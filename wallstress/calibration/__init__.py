"""A lab's own reference limits from its healthy subjects."""

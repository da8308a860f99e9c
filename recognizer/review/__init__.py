"""Review: what a person must check, their actions and undo, the queue, strictness, checked export."""

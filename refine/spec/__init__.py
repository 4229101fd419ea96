"""What the engineer asks for: the problem file and its parts (mask, fab rules)."""

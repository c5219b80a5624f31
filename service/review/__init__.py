"""The review queue: items people decide, claims, decisions that become evidence, new senses."""

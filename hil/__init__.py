"""Bench side of kinetab: serial framing, messages, the session with the drive controller, the
simulated controller, test plans, comparison and parameter fits. Reads the model and the generated
fingerprint; the feed-forward side never imports it."""

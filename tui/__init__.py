"""The bench UI (Textual) and the ``probelog`` command line. Thin: no physics here."""

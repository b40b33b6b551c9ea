"""Reports of verdicts: terminal text, JSON, JUnit XML, and reduction graphs as DOT."""

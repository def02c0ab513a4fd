"""Service functions of the dashboard pages: parse, query through db/, compute with ops_logic."""

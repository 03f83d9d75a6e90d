"""API views: parse input, call one service or query, shape the output."""

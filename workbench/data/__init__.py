"""Tables in: reading a file, profiling its columns and target, leak-free preprocessing."""

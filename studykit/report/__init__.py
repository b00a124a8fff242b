"""The PDF evidence report, its signatures and its verification."""

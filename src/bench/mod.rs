//! bench (placeholder; filled in by its issue).

//! Shared helpers for the cross-checks in `tests/tests/`.

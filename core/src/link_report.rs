//! The link report: per-symbol and per-frame channel quality (in progress).

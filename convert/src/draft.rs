//! Drafting descriptions.

//! The `kernlake` command-line tool.
fn main() {}

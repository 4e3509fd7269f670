//! Integration tests: the real `cleave` binary on real files.

mod bad_input;
mod check;
mod designs;
mod exact;
mod formats;
mod golden;
mod hand_made;
mod mutated;
mod reference;
mod reliability;
mod score;
mod split;
mod structure;
mod util;
mod verify;

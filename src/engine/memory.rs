//! Peak memory of a run, estimated before simulating.

//! Root package of the flexure workspace: integration tests and benches live here.

//! Reading CSV exports (long and wide layouts) into measurements, with every rejected row kept
//! together with its file, line, column and reason.

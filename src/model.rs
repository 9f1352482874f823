//! Plain domain types shared by every layer: characteristics, factors, periods, measurements.

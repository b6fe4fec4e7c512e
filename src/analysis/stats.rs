//! Statistics of Monte Carlo estimates against exact values.

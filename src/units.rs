//! Physical quantities with SI prefixes and units ("10 nA", "1.5 um", "300 K", "27 degC").

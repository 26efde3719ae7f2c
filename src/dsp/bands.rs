//! IEC 61260-1:2014 base-10 fractional-octave midband frequencies and the analysis grid.

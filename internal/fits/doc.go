// Package fits reads and writes FITS files: a primary HDU and any number of IMAGE
// extensions, with BITPIX −32, −64, 16 or 32 and one to three axes, and BINTABLE
// extensions (fixed-width rows of scalar or vector fields; TableWriter streams rows
// of a table too large to hold in memory), per the
// FITS Standard 4.0 (IAU FITS Working Group, 2016): 2880-byte records, 80-character
// header cards, big-endian two's-complement integers and IEEE floats.
//
// Header keywords are strings, logicals, integers and floats; commentary cards
// (COMMENT, HISTORY, blank) are kept in order. Not handled: long strings (a CONTINUE
// card is read as a card without a value, its text in Comment), complex header values,
// ASCII-table and random-groups extensions (refused), the heap of a binary table
// (skipped on reading), TDIMn and the TSCALn/TZEROn scaling of columns, and BSCALE/BZERO scaling (data are returned
// raw, the keywords kept in the header).
//
// Read never panics on corrupt or truncated input; it returns an error. The package
// depends only on the standard library.
package fits

// Package sheet reads QA logs as physics groups keep them — CSV or TSV
// text in UTF-8 or Windows-1252, and XLSX workbooks (Office Open XML,
// ISO/IEC 29500) — into one-beam checks, and writes checks back out in the
// long layout it reads. It is pure: bytes in, checks and refused rows out;
// machine names and beam labels are resolved to ids by the caller's
// function, and nothing is stored here.
//
// Two layouts are read. The long layout has one row per edge result (the
// columns of DefaultMapping); the wide layout has one row per check with a
// column per edge and quantity. A Mapping (TOML, see ParseMapping) says
// which column holds what, what the sheet leaves out (constants), the
// decimal mark, the date format, the time zone and the units.
package sheet

package main

import (
	"fmt"

	"halfmark/analysis/sheet"
)

// cmdImportSuggest writes a starting mapping for a file to stdout.
func cmdImportSuggest(e env) error {
	fs := newFlags(e, "import suggest", "import suggest FILE > mapping.toml")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one file (CSV, TSV or XLSX): halfmark import suggest FILE > mapping.toml")}
	}
	data, err := readImportFile(e, fs.Arg(0))
	if err != nil {
		return err
	}
	s, err := sheet.Suggest(data)
	if err != nil {
		return err
	}
	_, err = fmt.Fprint(e.stdout, s)
	return err
}

package main

import (
	"flag"
	"fmt"
	"io"
)

// parseAnywhere parses flags given before, between or after the positional
// arguments ("analyze profile FILE --fff" as well as "--fff FILE"). A bare
// "--" ends the flags: everything after it is positional, even "-x". The
// positional arguments are left in fs.Args() in their order.
func parseAnywhere(fs *flag.FlagSet, args []string) error {
	var pos []string
	for {
		if err := fs.Parse(args); err != nil {
			return err
		}
		rest := fs.Args()
		if used := len(args) - len(rest); used > 0 && args[used-1] == "--" {
			pos = append(pos, rest...)
			break
		}
		if len(rest) == 0 {
			break
		}
		pos, args = append(pos, rest[0]), rest[1:]
	}
	// Leave the positional arguments as the set's Args.
	return fs.Parse(append([]string{"--"}, pos...))
}

// printUsage writes a synopsis and every flag with its real default.
func printUsage(w io.Writer, fs *flag.FlagSet, synopsis string) {
	fmt.Fprintf(w, "%s\n\nFlags (each also read from HALFMARK_<NAME> in the environment; flags may come before or after the arguments, -- ends them):\n", synopsis)
	out := fs.Output()
	fs.SetOutput(w)
	fs.PrintDefaults()
	fs.SetOutput(out)
}

package main

import (
	"fmt"
	"os"
	"strconv"
	"strings"

	"stillsky/budgetsim"
	"stillsky/sim/scenario"
)

func init() {
	register("budget", "print the error budget of a scenario (fitting, aliasing, servo lag, noise), optionally measured by simulation", runBudget)
}

func runBudget(args []string) error {
	fs := newFlagSet("budget")
	scn := fs.String("scenario", scenario.Default, "built-in scenario name or path to a scenario YAML file")
	gain := fs.Float64("gain", budgetsim.DefaultGain, "integrator gain (the daemon's default 0.4)")
	leak := fs.Float64("leak", budgetsim.DefaultLeak, "integrator leak (the daemon's default 0.01)")
	asJSON := fs.Bool("json", false, "print the report as JSON")
	simulate := fs.Bool("simulate", false, "also measure each term on the lockstep bench (noise off; no-delay loop; best mirror fit)")
	seeds := fs.String("seeds", "1,2,3", "comma-separated turbulence seeds of --simulate")
	frames := fs.Int("frames", 2000, "measured frames per seed and run of --simulate")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	s, err := scenario.Load(*scn)
	if err != nil {
		return err
	}
	if s.Eye != nil {
		return fmt.Errorf("--scenario %s: an eye scenario has no layered atmosphere, which the error budget models", *scn)
	}
	var list []int64
	if *simulate {
		for _, f := range strings.Split(*seeds, ",") {
			v, err := strconv.ParseInt(strings.TrimSpace(f), 10, 64)
			if err != nil || v == 0 {
				return fmt.Errorf("--seeds %q: want non-zero integers separated by commas", *seeds)
			}
			list = append(list, v)
		}
	}
	rep, err := budgetsim.Evaluate(s, *gain, *leak, list, *frames)
	if err != nil {
		return err
	}
	if *asJSON {
		return rep.WriteJSON(os.Stdout)
	}
	return rep.WriteText(os.Stdout)
}

package main

import (
	"strings"

	"github.com/spf13/cobra"

	"kermalux/procedures/builtin"
)

// Shell completion (cobra's `kermalux completion bash|zsh|fish`): what each
// argument and flag can be.

// wireCompletion gives the commands registered in other files what their
// arguments and flags complete to, where they do not say it themselves:
// procedure names for run, serials for the store's commands.
func wireCompletion() {
	for _, c := range root.Commands() {
		switch c.Name() {
		case "run":
			if c.ValidArgsFunction == nil {
				c.ValidArgsFunction = completeProcedures
			}
		}
	}
	wireStoreCompletion()
}

// completeProcedures offers the built-in procedures' names.
func completeProcedures(c *cobra.Command, args []string, toComplete string) ([]string, cobra.ShellCompDirective) {
	return withPrefix(builtin.Names(), toComplete), cobra.ShellCompDirectiveNoFileComp
}

func withPrefix(list []string, prefix string) []string {
	var out []string
	for _, s := range list {
		if strings.HasPrefix(s, prefix) {
			out = append(out, s)
		}
	}
	return out
}

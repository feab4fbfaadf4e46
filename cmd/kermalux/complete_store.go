//go:build !board

package main

import (
	"sort"

	"github.com/spf13/cobra"

	"kermalux/firmware-host/journal/store"
)

// completeSerials offers the intensifier serial numbers of the store that
// *storePath names (given earlier on the command line).
func completeSerials(storePath *string) func(*cobra.Command, []string, string) ([]string, cobra.ShellCompDirective) {
	return func(c *cobra.Command, args []string, toComplete string) ([]string, cobra.ShellCompDirective) {
		if len(args) > 0 || *storePath == "" || !store.Exists(*storePath) {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		st, err := store.Open(*storePath)
		if err != nil {
			return nil, cobra.ShellCompDirectiveError
		}
		defer st.Close()
		infos, err := st.Sessions(c.Context(), store.Query{})
		if err != nil {
			return nil, cobra.ShellCompDirectiveError
		}
		seen := map[string]bool{}
		var serials []string
		for _, in := range infos {
			if s := in.Session.IntensifierSerial; s != "" && !seen[s] {
				seen[s] = true
				serials = append(serials, s)
			}
		}
		sort.Strings(serials)
		return withPrefix(serials, toComplete), cobra.ShellCompDirectiveNoFileComp
	}
}

// wireStoreCompletion completes --serial of report from its --store.
func wireStoreCompletion() {
	for _, c := range root.Commands() {
		if c.Name() != "report" || c.Flags().Lookup("serial") == nil || c.Flags().Lookup("store") == nil {
			continue
		}
		store := c.Flags().Lookup("store")
		_ = c.RegisterFlagCompletionFunc("serial", func(cmd *cobra.Command, args []string, toComplete string) ([]string, cobra.ShellCompDirective) {
			path := store.Value.String()
			return completeSerials(&path)(cmd, nil, toComplete)
		})
	}
}

// quantities are the figures of merit results carry.
var quantities = []string{"conversion_factor", "input_kerma_rate", "kerma_rate_scaling", "non_uniformity", "contrast_ratio", "dark_level", "stability"}

// completeQuantities offers the result quantities.
func completeQuantities(c *cobra.Command, args []string, toComplete string) ([]string, cobra.ShellCompDirective) {
	return withPrefix(quantities, toComplete), cobra.ShellCompDirectiveNoFileComp
}

package cli

import (
	"context"
	"fmt"
	"text/tabwriter"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

func init() {
	register("audit", "show glissd's audit log (every operate call: who, what, when, outcome)", &Command{
		Name:    "list",
		Summary: "list audit entries, newest first",
		Usage:   "[--limit N] [--server ADDR] [--token-file FILE] [--ca-cert FILE]",
		Example: "gliss audit --limit 20",
		Run:     runAudit,
	})
	setDefault("audit", "list")
}

func runAudit(ctx context.Context, env *Env, args []string) error {
	c := groups["audit"].Commands["list"]
	fs := NewFlagSet(env, "audit", c)
	server := serverFlag(fs, env)
	limit := fs.Int("limit", 50, "at most this many entries (1 to 100000)")
	if err := Parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() != 0 {
		return Usagef("gliss audit: unexpected argument %q (only flags)", fs.Arg(0))
	}
	if *limit < 1 || *limit > 100000 {
		return Usagef("gliss audit: --limit %d: allowed 1 to 100000", *limit)
	}
	cl, err := dial(ctx, *server)
	if err != nil {
		return err
	}
	defer cl.Close()
	tw := tabwriter.NewWriter(env.Stdout, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "TIME (UTC)\tWHO\tMETHOD\tOUTCOME\tTARGET")
	left, token := *limit, ""
	for left > 0 {
		resp, err := cl.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{PageSize: uint32(min(left, 1000)), PageToken: token})
		if err != nil {
			return rpcError(err, nil)
		}
		for _, e := range resp.GetEntries() {
			fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\n", e.GetAt().AsTime().UTC().Format(time.DateTime+".000"), e.GetWho(), e.GetMethod(), e.GetOutcome(), e.GetTarget())
			left--
		}
		token = resp.GetNextPageToken()
		if token == "" || len(resp.GetEntries()) == 0 {
			break
		}
	}
	return tw.Flush()
}

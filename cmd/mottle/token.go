package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/service/access"
)

// runToken adds, lists and revokes the tokens of a token file.
func runToken(ctx context.Context, e *env, args []string) error {
	if len(args) == 0 || (args[0] != "add" && args[0] != "list" && args[0] != "revoke") {
		if len(args) > 0 && (args[0] == "-h" || args[0] == "--help") {
			fmt.Fprint(e.stdout, tokenHelp)
			return nil
		}
		fmt.Fprint(e.stderr, tokenHelp)
		return errUsage
	}
	verb := args[0]
	fl := newFlags(e, "token "+verb, map[string]string{
		"add":    "--file F --principal NAME --grant PROJECT=ROLE[,PROJECT=ROLE…] [--expires 720h]",
		"list":   "--file F",
		"revoke": "--file F ID|--principal NAME",
	}[verb], tokenHelp)
	file := fl.String("file", envOr("MOTTLE_TOKEN_FILE", "mottle-tokens.jsonl"), "token file (env MOTTLE_TOKEN_FILE)")
	principal := fl.String("principal", "", "principal the token acts for (add), or whose tokens to revoke (revoke)")
	grant := fl.String("grant", "", "comma-separated PROJECT=ROLE grants, ROLE one of read, submit, manage; the first project is the token's default")
	expires := fl.Duration("expires", 0, "the token expires after this long (0 = never)")
	pos, err := parseArgs(e, fl, args[1:])
	if err != nil {
		return err
	}
	recs, err := readTokenFile(*file)
	_ = ctx
	if err != nil {
		return err
	}
	switch verb {
	case "add":
		if len(pos) > 0 {
			return usageError{fmt.Errorf("unexpected arguments %q", pos)}
		}
		if err := access.CheckName("--principal", *principal); err != nil {
			return usageError{err}
		}
		var grants []access.Grant
		for _, g := range strings.Split(*grant, ",") {
			proj, role, ok := strings.Cut(strings.TrimSpace(g), "=")
			r, rerr := access.ParseRole(role)
			if !ok || rerr != nil {
				return usageError{fmt.Errorf("--grant %q: use PROJECT=ROLE with ROLE read, submit or manage", g)}
			}
			if proj != access.AllProjects {
				if err := access.CheckName("--grant project", proj); err != nil {
					return usageError{err}
				}
			}
			grants = append(grants, access.Grant{Project: proj, Role: r})
		}
		now := time.Now().UTC().Truncate(time.Second)
		var exp *time.Time
		if *expires > 0 {
			t := now.Add(*expires)
			exp = &t
		}
		tok, rec, err := access.NewToken(*principal, grants, now, exp)
		if err != nil {
			return err
		}
		if err := writeTokenFile(*file, append(recs, rec)); err != nil {
			return err
		}
		fmt.Fprintf(e.stderr, "added token %s for %s to %s; it is shown once, keep it now:\n", rec.ID(), rec.Principal, *file)
		fmt.Fprintln(e.stdout, tok)
		return nil
	case "list":
		sort.SliceStable(recs, func(i, j int) bool { return recs[i].Created.Before(recs[j].Created) })
		fmt.Fprintf(e.stdout, "%-12s  %-20s  %-20s  %-20s  %s\n", "ID", "PRINCIPAL", "CREATED", "EXPIRES", "GRANTS")
		for _, r := range recs {
			exp := "never"
			if r.Expires != nil {
				exp = r.Expires.UTC().Format(time.RFC3339)
			}
			var gs []string
			for _, g := range r.Grants {
				gs = append(gs, g.Project+"="+g.Role.String())
			}
			fmt.Fprintf(e.stdout, "%-12s  %-20s  %-20s  %-20s  %s\n", r.ID(), r.Principal, r.Created.UTC().Format(time.RFC3339), exp, strings.Join(gs, ","))
		}
		return nil
	default: // revoke
		if (len(pos) == 1) == (*principal != "") || len(pos) > 1 {
			return usageError{errors.New("give one token ID (from mottle token list) or --principal")}
		}
		var keep []*access.Record
		n := 0
		for _, r := range recs {
			if len(pos) == 1 && r.ID() == pos[0] || *principal != "" && r.Principal == *principal {
				n++
				continue
			}
			keep = append(keep, r)
		}
		if n == 0 {
			return fmt.Errorf("%s holds no such token; see mottle token list", *file)
		}
		if err := writeTokenFile(*file, keep); err != nil {
			return err
		}
		fmt.Fprintf(e.stderr, "revoked %d token(s); a running server refuses them from its next request\n", n)
		return nil
	}
}

const tokenHelp = `Usage: mottle token add|list|revoke [flags]

Manage the token file of mottle serve --token-file. The file keeps only
the SHA-256 digest of each token (tokens are 32 random bytes, so a digest
is enough), with its principal, grants, creation and expiry. The server
rereads the file when it changes: adding and revoking need no restart.

  mottle token add --principal rig-3 --grant lab-a=submit      prints a new token once
  mottle token list                                            ids, principals, grants
  mottle token revoke 3f2a9c01b4de                             by id, or --principal rig-3
`

func readTokenFile(path string) ([]*access.Record, error) {
	f, err := os.Open(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	defer f.Close()
	return access.Parse(f)
}

// writeTokenFile replaces the file atomically (write, sync, rename), so
// a server never reads half a file.
func writeTokenFile(path string, recs []*access.Record) error {
	var b bytes.Buffer
	b.WriteString("# mottle token file: SHA-256 digests of tokens, one JSON object a line; edit with mottle token\n")
	if err := access.Format(&b, recs); err != nil {
		return err
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), ".tokens-*")
	if err != nil {
		return fmt.Errorf("token file: %w", err)
	}
	defer os.Remove(tmp.Name())
	if _, err := tmp.Write(b.Bytes()); err == nil {
		err = tmp.Sync()
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Chmod(tmp.Name(), 0o600)
	}
	if err == nil {
		err = os.Rename(tmp.Name(), path)
	}
	if err != nil {
		return fmt.Errorf("token file %s: %w", path, err)
	}
	return nil
}

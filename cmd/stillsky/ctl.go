package main

import (
	"context"
	"os"
	"time"

	"stillsky/cmd/stillsky/internal/ctl"
	"stillsky/internal/rpc"
)

func init() {
	register("ctl", "talk to a running loop daemon: "+ctl.Usage, runCtl)
}

func runCtl(args []string) error {
	fs := newFlagSet("ctl")
	addr := fs.String("addr", "127.0.0.1:7411", "the loop daemon's Control API address")
	timeout := fs.Duration("timeout", 10*time.Minute, "give up after this long")
	var cred rpc.ClientCredentials
	fs.StringVar(&cred.CAFile, "tls-ca", "", "CA of the daemon's TLS certificate (PEM); turns TLS on")
	fs.StringVar(&cred.CertFile, "cert", "", "client certificate for mutual TLS (PEM)")
	fs.StringVar(&cred.KeyFile, "key", "", "client key for mutual TLS (PEM)")
	fs.StringVar(&cred.TokenFile, "token-file", "", "file holding the bearer token (needs --tls-ca)")
	if err := fs.Parse(args); err != nil {
		return err
	}
	opts, err := cred.DialOptions()
	if err != nil {
		return err
	}
	conn, err := rpc.Dial(*addr, opts...)
	if err != nil {
		return err
	}
	defer conn.Close()
	ctx, cancel := context.WithTimeout(context.Background(), *timeout)
	defer cancel()
	return ctl.Run(ctx, conn, fs.Args(), os.Stdout)
}

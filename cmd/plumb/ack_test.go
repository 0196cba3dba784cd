package main

import (
	"context"
	"encoding/json"
	"strings"
	"testing"
	"time"
)

func TestAlertsAck(t *testing.T) {
	ctx := context.Background()
	cfg, _ := demoConfig(t, "")
	// One pass records the demo's alerts (its exit status is check's
	// business, not this test's).
	if _, out, errs := plumbCLI(t, ctx, "check", "--config", cfg, "-q"); !strings.Contains(out+errs, "district_daily") {
		t.Fatalf("check:\n%s\n%s", out, errs)
	}
	list := func() []alertOutput {
		t.Helper()
		code, out, errs := plumbCLI(t, ctx, "alerts", "--config", cfg, "--format", "json", "--open")
		if code != 0 {
			t.Fatalf("alerts: exit %d: %s", code, errs)
		}
		var as []alertOutput
		if err := json.Unmarshal([]byte(out), &as); err != nil {
			t.Fatal(err)
		}
		return as
	}
	as := list()
	if len(as) == 0 {
		t.Fatal("no open alert to acknowledge")
	}
	target := as[0]
	for _, a := range as {
		if a.Acknowledged != nil {
			t.Fatalf("acknowledged before anyone did: %+v", a)
		}
	}
	before := time.Now().Add(-time.Second)
	code, out, errs := plumbCLI(t, ctx, "alerts", "ack", target.ID[:8], "--config", cfg, "--for", "3d", "--note", "harbour meters being replaced")
	if code != 0 || !strings.Contains(out, target.ID) || !strings.Contains(out, "snoozed until") || !strings.Contains(out, "harbour meters being replaced") {
		t.Fatalf("ack: exit %d\n%s\n%s", code, out, errs)
	}
	var got *alertOutput
	for _, a := range list() {
		if a.ID == target.ID {
			got = &a
		}
	}
	if got == nil || got.Acknowledged == nil {
		t.Fatalf("acknowledgement not listed: %+v", got)
	}
	ack := got.Acknowledged
	if ack.By != osUser() || ack.Note != "harbour meters being replaced" || ack.At.Before(before) ||
		ack.Until.Sub(ack.At) != 72*time.Hour || string(ack.Severity) != target.Severity {
		t.Fatalf("acknowledgement %+v", ack)
	}
	// The raw JSON names the fields as documented.
	_, raw, _ := plumbCLI(t, ctx, "alerts", "--config", cfg, "--format", "json", "--open")
	for _, k := range []string{`"acknowledged": {`, `"by": `, `"at": `, `"until": `, `"note": "harbour meters being replaced"`} {
		if !strings.Contains(raw, k) {
			t.Errorf("alerts JSON lacks %s", k)
		}
	}
	if _, out, _ := plumbCLI(t, ctx, "alerts", "--config", cfg, "--open"); !strings.Contains(out, "acknowledged by "+osUser()) {
		t.Errorf("alerts text does not show the acknowledgement:\n%s", out)
	}
	// Without --for it holds until the alert resolves or escalates.
	if code, out, errs := plumbCLI(t, ctx, "alerts", "ack", target.ID, "--config", cfg); code != 0 || !strings.Contains(out, "until it resolves or escalates") {
		t.Fatalf("ack without --for: exit %d\n%s\n%s", code, out, errs)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"alerts", "ack", target.ID, "--config", cfg, "--for", "soon"}, "--for"},
		{[]string{"alerts", "ack", target.ID, "--config", cfg, "--for", "-2h"}, "--for"},
		{[]string{"alerts", "ack", "ffffffffffffff", "--config", cfg}, "no such alert"},
		{[]string{"alerts", "ack", "--config", cfg}, "arg"},
	} {
		if code, _, errs := plumbCLI(t, ctx, c.args...); code == 0 || !strings.Contains(errs, c.want) {
			t.Errorf("%v: exit %d: %s", c.args, code, errs)
		}
	}
}

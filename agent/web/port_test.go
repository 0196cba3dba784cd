package web

import (
	"net"
	"testing"
)

// TestDefaultPortIsPlumbs: the default port is plumb's own, not 9464 (a
// widely used telemetry SDK's metrics exporter), and the address is
// loopback so that no token is needed.
func TestDefaultPortIsPlumbs(t *testing.T) {
	host, port, err := net.SplitHostPort(DefaultListen)
	if err != nil {
		t.Fatal(err)
	}
	if port == "9464" || port != "7586" {
		t.Errorf("default port %s, want 7586", port)
	}
	if ip := net.ParseIP(host); ip == nil || !ip.IsLoopback() {
		t.Errorf("default host %s is not loopback", host)
	}
	if _, err := New(Options{View: &Memory{}}); err != nil {
		t.Errorf("the default address needs no token: %v", err)
	}
}

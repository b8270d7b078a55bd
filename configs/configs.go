// Package configs holds glowgate's example configurations. demo.yaml, the
// configuration `glowgate demo` runs, is embedded in the binary; the
// directory also ships the systemd unit glowgate.service.
package configs

import _ "embed"

// Demo is demo.yaml: the invented Brackwater Steelworks with three
// simulated ratio pyrometer heads on one Modbus TCP endpoint.
//
//go:embed demo.yaml
var Demo []byte

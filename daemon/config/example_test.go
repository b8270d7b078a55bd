package config_test

import (
	"errors"
	"fmt"

	"glowgate/daemon/config"
)

func ExampleParse() {
	cfg, err := config.Parse("kiln.yaml", []byte(`
gateway: kiln-gw
endpoints:
  - {name: net, address: "192.0.2.10:502"}
heads:
  - name: firing-zone
    endpoint: net
    period: 500ms
    range: {min: 700degC, max: 1600degC}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	h, _ := cfg.Head("firing-zone")
	fmt.Printf("%s: every %v, %.2f..%.2f K\n", h.Name, h.Period, h.RangeMin, h.RangeMax)
	for _, ch := range h.Channels {
		fmt.Printf("%s %.3g um\n", ch.Name, ch.Wavelength()*1e6)
	}
	// Output:
	// firing-zone: every 500ms, 973.15..1873.15 K
	// short 0.9 um
	// long 1.05 um
}

func ExampleErrors() {
	_, err := config.Parse("kiln.yaml", []byte(`
gateway: kiln/gw
endpoints: [{name: net, address: "192.0.2.10"}]
heads:
  - name: firing-zone
    endpoint: net
    period: 500
    range: {min: 700degC, max: 1600degC}
    channels:
      - {name: short, band: {from: 0.875, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
`))
	var errs config.Errors
	if errors.As(err, &errs) {
		for _, e := range errs {
			fmt.Println(e)
		}
	}
	// Output:
	// kiln.yaml:2: gateway: "kiln/gw" contains '/' (not allowed in an MQTT topic level)
	// kiln.yaml:3: endpoints[0].address: bad address "192.0.2.10" (want host:port such as 127.0.0.1:502)
	// kiln.yaml:7: heads[0].period: missing unit (want a duration such as 500ms)
	// kiln.yaml:10: heads[0].channels[0].band.from: missing unit (want a length such as 0.9um)
}

func ExampleParseTemperature() {
	k, err := config.ParseTemperature("1200degC")
	fmt.Println(k, err)
	_, err = config.ParseTemperature("1200kelvin")
	fmt.Println(err)
	// Output:
	// 1473.15 <nil>
	// unknown unit "kelvin" (want K or degC)
}

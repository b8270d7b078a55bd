// Package config reads glowgate's YAML configuration: it fills the
// defaults, decodes strictly, checks every value and reference, and reports
// every problem it finds with the file, line and field path:
//
//	demo.yaml:14: heads[1].channels[0].band.from: missing unit (want a length such as 0.9um)
//
// Parse and Load return a *Config only when the file has no problem at
// all; otherwise the error is an Errors value listing each problem, sorted
// by line. A daemon that reloads its configuration parses a fresh Config
// and swaps it whole, keeping the old one when the new one has errors.
//
// # Quantities
//
// Quantities carry their unit, as people write them: a decimal number,
// optional spaces, and a case-sensitive unit. A bare number where a unit
// is due is an error ("missing unit"). Values are stored in SI units.
//
//	length (wavelengths)       nm, um (also µm), mm, m          -> m
//	temperature                K, degC (T = t + 273.15)         -> K, above 0 K
//	temperature difference     K                                -> K
//	rate                       K/s, K/min                       -> K/s
//	duration                   Go syntax: 500ms, 2s, 1m30s      -> time.Duration (spaces ignored)
//	fraction                   5% or a bare number 0..1         -> fraction
//	Sakuma–Hattori B           umK (also µmK), mK               -> m·K
//
// Emissivity ratio, scale, offset, Sakuma–Hattori C, emissivities, unit
// ids, addresses and seeds are bare YAML numbers; a quoted number is a
// string and refused. NaN and infinities are refused everywhere.
//
// # Schema
//
// The top level holds gateway (required), unit (degC or K, default degC),
// mqtt, endpoints and heads (at least one). Field by field, with the
// defaults and the decisions this package makes where the design left a
// choice:
//
//	gateway                 one MQTT topic level: not empty, no '/', '+', '#',
//	                        no spaces or control characters, at most 256 bytes
//	mqtt.brokers            list of URLs scheme://host:port, schemes tcp, mqtt, ssl,
//	                        tls, ws, wss; no credentials in the URL; a path only
//	                        for ws/wss. May be absent: Parse accepts a
//	                        configuration without brokers, and the command that
//	                        connects must then be given one (CheckBrokerURLs
//	                        checks such URLs by the same rules).
//	mqtt.root               default glowgate; topic-level rules, and must not
//	                        start with '$' (broker topics)
//	mqtt.client_id          default glowgate-<gateway>; "" also means the default
//	mqtt.keepalive          default 30s; whole seconds from 1s to 65535s (MQTT
//	                        sends it as 16-bit seconds)
//	mqtt.connect_timeout    default 5s; > 0
//	mqtt.queue              default 10000; 1..1000000
//	mqtt.username           optional string
//	endpoints[].name        required, unique; any non-empty string
//	endpoints[].address     required host:port, port 1..65535
//	endpoints[].timeout     default 500ms; > 0
//	endpoints[].backoff_max default 10s; > 0 and not shorter than timeout
//	endpoints[].in_flight   default 1; 1..128 requests in flight at once
//	heads[].name            required, unique; topic-level rules as gateway
//	heads[].endpoint        required; names an endpoint
//	heads[].unit_id         default 1; 0..247
//	heads[].registers       input (default) or holding
//	heads[].period          default 1s; at least 1ms
//	heads[].range           required {min, max} temperatures, min < max
//	heads[].emissivity_ratio default 1; > 0 (k = ε short / ε long)
//	heads[].low_signal      default 2%; from 0 to below 100% (0 never flags)
//	heads[].description     optional string
//	heads[].channels        exactly 2, short wavelength first (band centre or
//	                        Sakuma–Hattori A strictly increasing), unique names
//	channels[].band         {from, to}: wavelengths within 0.1um..100um (outside
//	                        it is taken for a unit slip), from < to
//	channels[].sakuma_hattori {a, b, c}: a a wavelength as above, b a
//	                        length·temperature with a·T + b > 0 over the range,
//	                        c > 0; exactly one of band and sakuma_hattori
//	channels[].signal       address 0..65535 and type (uint16, int16, uint32,
//	                        int32, float32) required; word_order high_first
//	                        (default) or low_first, only for 32-bit types;
//	                        byte_order big (default) or little; scale (default
//	                        1, not 0) and offset (default 0). The signals of a
//	                        head must not overlap and must fit one read of at
//	                        most 125 registers.
//	heads[].sim             optional; see below
//
// # Simulation scenarios
//
// Every head gets simulation defaults, with or without a sim section
// (Sim.Set tells whether it had one): seed derived from the head name
// (FNV-1a 64 of the name, shifted right by one bit), noise 0, emissivity 1
// for each channel, temperature constant at the middle of the range,
// transmission constant at 100 %.
//
//	sim.seed                any 64-bit integer
//	sim.noise               fraction from 0 to below 100%
//	sim.emissivity          one number per channel, each in (0, 1]
//	sim.temperature         profile of temperatures (above 0 K; they may leave
//	                        the measuring range on purpose)
//	sim.transmission        profile of fractions within 0..100%
//
// A profile is {start, repeat, segments}. start defaults as above; repeat
// defaults to false (the last value then holds) and, when true, needs a
// hold or ramp so that a pass takes time. Each segment is a mapping with
// exactly one of hold (a duration > 0), ramp (a value, with over: a
// duration > 0) and step (a value); over goes with ramp only. In the
// decoded Segment, a hold's Value is the value it holds.
//
// # YAML
//
// One document per file (a trailing "---" is tolerated). Unknown keys, duplicate keys and values of the
// wrong kind (a mapping where a number is due, say) are errors. Anchors,
// aliases and merge keys (<<) work; keys written in a mapping win over
// merged ones. An empty value (null) counts as absent: the default
// applies, or "required" is reported. Error.Line is the line of the key or
// list item the path names, so an error in a value reached through an
// alias points at the use, not at the anchor. A YAML syntax error carries
// the line the YAML parser (gopkg.in/yaml.v3) gives: for a broken
// structure that is often the line where the enclosing block starts, not
// the line that breaks it.
package config

module glowgate

go 1.26.0

require (
	github.com/eclipse/paho.mqtt.golang v1.5.1
	github.com/goburrow/modbus v0.1.0
	github.com/mochi-mqtt/server/v2 v2.7.9
	github.com/simonvetter/modbus v1.6.4
	golang.org/x/sync v0.25.0
	gonum.org/v1/gonum v0.17.0
	gopkg.in/yaml.v3 v3.0.1
)

require (
	github.com/goburrow/serial v0.1.0 // indirect
	github.com/gorilla/websocket v1.5.3 // indirect
	github.com/rs/xid v1.4.0 // indirect
	golang.org/x/net v0.44.0 // indirect
)

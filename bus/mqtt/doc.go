// Package mqtt is glowgate's message bus: the topic tree, the Reading
// payload and its encoder, a durable Outbox that assigns the gateway
// sequence number and keeps every entry on disk until a broker has
// acknowledged it, a Publisher that drains the outbox (and an in-memory
// queue for info and retained states) at QoS 1 and receives commands, and
// an embedded broker for the zero-setup demo.
//
// The Publisher follows one rule from paho.mqtt.golang's behaviour: with
// automatic reconnection a completed token does not prove delivery, so it
// opens a new client with a clean session for every connection and runs
// its own backoff loop; on such a connection a token completed without
// error is a PUBACK, and only then is an outbox entry deleted. A crash or
// a broken connection can make a broker receive an entry twice (consumers
// dedupe on gateway and sequence number), never lose one that was
// committed. Test helpers live in package mqtttest.
package mqtt

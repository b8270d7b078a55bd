// Package mqtt is glowgate's message bus: the topic tree, the Reading
// payload and its encoder, a Publisher that delivers at QoS 1 without
// losing what it has queued when the network or the broker goes away, and
// an embedded broker for the zero-setup demo.
//
// The Publisher follows one rule from paho.mqtt.golang's behaviour: with
// automatic reconnection a completed token does not prove delivery, so it
// opens a new client with a clean session for every connection and runs
// its own backoff loop; on such a connection a token completed without
// error is a PUBACK. Test helpers live in package mqtttest.
package mqtt

package mqtt

import (
	"bufio"
	"crypto/tls"
	"errors"
	"net"
	"net/url"

	paho "github.com/eclipse/paho.mqtt.golang"
	"golang.org/x/net/proxy"
)

// readBuffer is the size of a connection's read buffer: many PUBACKs (4
// bytes each) or a few incoming commands.
const readBuffer = 4096

// bufferedConn reads its connection through a buffer. paho reads a packet
// a few bytes at a time (the fixed header's first byte, each byte of the
// remaining length, then the rest), one system call each on a bare
// connection: a PUBACK cost three reads. Through the buffer one read takes
// whatever has arrived, often the acknowledgements of many messages.
type bufferedConn struct {
	net.Conn
	r *bufio.Reader
}

func (c *bufferedConn) Read(p []byte) (int, error) { return c.r.Read(p) }

// openConnection dials broker as paho itself would for each scheme
// (CheckBrokers lists them; plain TCP honours the proxy environment
// variables, as paho does) and buffers the connection's reads.
func openConnection(broker *url.URL, o paho.ClientOptions) (net.Conn, error) {
	var conn net.Conn
	var err error
	switch broker.Scheme {
	case "tcp", "mqtt":
		conn, err = proxy.FromEnvironmentUsing(o.Dialer).Dial("tcp", broker.Host)
	case "ssl", "tls", "mqtts", "tcps":
		conn, err = tls.DialWithDialer(o.Dialer, "tcp", broker.Host, o.TLSConfig)
	case "ws", "wss":
		u := *broker
		u.User = nil // paho's own rule: the websocket dialer refuses credentials in the URL
		var tc *tls.Config
		if broker.Scheme == "wss" {
			tc = o.TLSConfig
		}
		conn, err = paho.NewWebsocket(u.String(), tc, o.ConnectTimeout, o.HTTPHeaders, o.WebsocketOptions)
	default:
		return nil, errors.New("unknown scheme " + broker.Scheme)
	}
	if err != nil {
		return nil, err
	}
	return &bufferedConn{Conn: conn, r: bufio.NewReaderSize(conn, readBuffer)}, nil
}

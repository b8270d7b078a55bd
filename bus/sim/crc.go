package sim

// crc16 is the CRC of Modbus RTU frames, CRC-16/MODBUS: polynomial 0x8005
// reflected (0xA001), initial value 0xFFFF, no final XOR (Modbus over Serial
// Line V1.02, 2.5.1.2 and appendix B). It is sent low byte first.
//
// Check values (LIBRARIES.md, "Modbus spec"): "123456789" gives 0x4B37;
// 01 03 00 00 00 0A gives 0xCDC5, sent as C5 CD.
func crc16(b []byte) uint16 {
	crc := uint16(0xFFFF)
	for _, c := range b {
		crc ^= uint16(c)
		for range 8 {
			if crc&1 != 0 {
				crc = crc>>1 ^ 0xA001
			} else {
				crc >>= 1
			}
		}
	}
	return crc
}

// appendCRC appends the CRC of frame, low byte first.
func appendCRC(frame []byte) []byte {
	crc := crc16(frame)
	return append(frame, byte(crc), byte(crc>>8))
}

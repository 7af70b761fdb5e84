/*
 * rl_crc.c - CRC-16/CCITT-FALSE: polynomial 0x1021, initial value 0xFFFF, no reflection of
 * input or output, final XOR 0x0000. Check value: CRC("123456789") = 0x29B1.
 *
 * Why bitwise and not a 512-byte lookup table: a frame is at most 256 bytes and arrives at
 * UART speed, so eight shift/XOR steps per byte cost far less than the byte takes on the wire,
 * and small microcontrollers keep the flash. Swap in a table if a profile ever says so; the
 * unit tests pin the results.
 */
#include "rl_crc.h"

uint16_t rl_crc16_update(uint16_t crc, const uint8_t *data, size_t len)
{
    size_t i;
    for (i = 0; i < len; ++i) {
        int bit;
        crc = (uint16_t)(crc ^ (uint16_t)((uint16_t)data[i] << 8));
        for (bit = 0; bit < 8; ++bit) {
            if ((crc & 0x8000u) != 0u) {
                crc = (uint16_t)((uint16_t)(crc << 1) ^ 0x1021u);
            } else {
                crc = (uint16_t)(crc << 1);
            }
        }
    }
    return crc;
}

uint16_t rl_crc16(const uint8_t *data, size_t len)
{
    return rl_crc16_update(RL_CRC16_INIT, data, len);
}

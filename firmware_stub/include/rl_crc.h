/*
 * rl_crc.h - CRC-16/CCITT-FALSE, the checksum that closes every rigloop frame.
 */
#ifndef RL_CRC_H
#define RL_CRC_H

#include "rl_common.h"

/* Initial register value of CRC-16/CCITT-FALSE. */
#define RL_CRC16_INIT 0xFFFFu

/*
 * Continue a CRC-16/CCITT-FALSE over len more bytes, starting from the register value crc.
 * Lets a caller checksum a frame in pieces; start with RL_CRC16_INIT.
 */
uint16_t rl_crc16_update(uint16_t crc, const uint8_t *data, size_t len);

/* CRC-16/CCITT-FALSE of a whole buffer: rl_crc16_update(RL_CRC16_INIT, data, len). */
uint16_t rl_crc16(const uint8_t *data, size_t len);

#endif /* RL_CRC_H */

/*
 * The port contract: the few functions a board supplies to the portable core.
 *
 * A port is one C file (see avr/port_avr.c and host/port_host.c). It sets up its timer, inputs,
 * actuator outputs and UART, calls bl_init() once, then calls bl_poll() from its main loop forever,
 * and calls bl_capture_isr() from its pin-change interrupt. Everything else is the core's job.
 *
 * Functions the port supplies:
 *
 *   bl_port_now()            the free-running counter, counter_bits wide (the low counter_bits of a
 *                            uint32_t; 16..32). Called from the main loop with interrupts enabled,
 *                            so it must itself be safe against its own overflow interrupt.
 *   bl_port_read_levels()    contact levels of every channel now, bit i = channel i, 1 = closed
 *                            (a pulled-up input reads low when closed: the port inverts).
 *   bl_port_set_actuator()   switch channel's actuator output on (1) or off (0).
 *   bl_port_tx_room()        bytes the UART transmit path can take now without blocking.
 *   bl_port_tx()             queue one byte for transmission; only called when room > 0.
 *   bl_port_rx()             next received byte, or -1 when none is waiting.
 *   bl_port_irq_save()       disable interrupts, return the previous state;
 *   bl_port_irq_restore()    restore it (a critical section, nestable).
 */
#ifndef BL_PORT_H
#define BL_PORT_H

#include <stdint.h>

#include "bl_config.h"

uint32_t bl_port_now(void);
bl_mask_t bl_port_read_levels(void);
void bl_port_set_actuator(uint8_t channel, uint8_t on);
uint16_t bl_port_tx_room(void);
void bl_port_tx(uint8_t byte);
int bl_port_rx(void);
bl_irqstate_t bl_port_irq_save(void);
void bl_port_irq_restore(bl_irqstate_t state);

#endif

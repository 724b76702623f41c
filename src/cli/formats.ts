import type { RegisterCommand } from "./commands.js";

/** `headroom formats` — not built yet; registers nothing. */
export const register: RegisterCommand = () => {};

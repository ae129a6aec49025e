/* The round form with no signal.

   With signal the form posts to the server as it does without script. "Signal" means the server answers: the
   browser's navigator.onLine says only that some network is there (a plant's Wi-Fi with no way to the server says
   true, and so does a page opened from this device's copy), so before the form goes, the server is asked
   (reachable); if it does not answer, the reading is kept here as with no network at all. With none, the checks
   that can run here do (from the server's own rules, fetched as data from /rounds/<id>/rules.json), and the
   reading waits on this device (IndexedDB) under an id made here. When the connection is back each waiting
   reading is sent to POST /api/readings with that id as client_id, so sending twice never stores twice; the
   server's answer is shown beside it. */
(function () {
  "use strict";

  const app = document.getElementById("rounds-app");
  if (!app) return;
  const DB_NAME = "fleet-rounds";
  const STORE = "readings";
  const form = document.querySelector("form.reading-form");
  let rules = null;
  let sending = false;
  // The form's labels, written by the page from the server's one list (_app.html): a message names a field as
  // the form labels it. A column that is no input of the form (the pump, its place) keeps its own name.
  const labels = JSON.parse(app.dataset.labels || "{}");
  const labelOf = (column) => labels[String(column || "").replace(/\s*\[.*\]\s*$/, "").trim().toLowerCase()];

  // --- the one reader of typed numbers --------------------------------------------------------------------
  // null for a blank cell, NaN for text that is not a number. A decimal comma ("120,5") is read only where the
  // form says so (data-decimal-comma), so a change of convention is made here and nowhere else.
  function readNumber(text, owner) {
    let cell = String(text == null ? "" : text).trim();
    if (cell === "") return null;
    const comma = owner && owner.hasAttribute("data-decimal-comma")
      && owner.getAttribute("data-decimal-comma") !== "false";
    if (comma && cell.indexOf(",") >= 0 && cell.indexOf(".") < 0) cell = cell.replace(",", ".");
    return /^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$/.test(cell) ? Number(cell) : NaN;
  }

  // --- the device's store ---------------------------------------------------------------------------------
  function openStore() {
    return new Promise((resolve, reject) => {
      const request = indexedDB.open(DB_NAME, 1);
      request.onupgradeneeded = () => request.result.createObjectStore(STORE, {keyPath: "client_id"});
      request.onsuccess = () => resolve(request.result);
      request.onerror = () => reject(request.error);
    });
  }

  function withStore(mode, use) {
    return openStore().then((db) => new Promise((resolve, reject) => {
      const transaction = db.transaction(STORE, mode);
      const result = use(transaction.objectStore(STORE));
      transaction.oncomplete = () => { db.close(); resolve(result && "result" in result ? result.result : result); };
      transaction.onerror = () => { db.close(); reject(transaction.error); };
    }));
  }

  const allKept = () => withStore("readonly", (store) => store.getAll());
  const keep = (record) => withStore("readwrite", (store) => store.put(record));
  const forget = (clientId) => withStore("readwrite", (store) => store.delete(clientId));

  function newId() {
    if (crypto.randomUUID) return crypto.randomUUID();
    const bytes = crypto.getRandomValues(new Uint8Array(16));
    bytes[6] = (bytes[6] & 0x0f) | 0x40;
    bytes[8] = (bytes[8] & 0x3f) | 0x80;
    const hex = Array.from(bytes, (b) => b.toString(16).padStart(2, "0")).join("");
    return `${hex.slice(0, 8)}-${hex.slice(8, 12)}-${hex.slice(12, 16)}-${hex.slice(16, 20)}-${hex.slice(20)}`;
  }

  // --- the checks that run here ---------------------------------------------------------------------------
  function shown(value) {
    return Number.isInteger(value) ? String(value) : String(Number(value.toPrecision(6)));
  }

  // A number with ``digits`` decimals as the server's messages write it (Python's format): the binary value
  // rounded, an exact tie to the even digit, where toFixed takes the larger (36.25 L/min: 36.2, not 36.3).
  function fixed(value, digits) {
    const rounded = value.toFixed(digits);
    const [whole, fraction] = Math.abs(value).toFixed(100).split(".");  // the binary value's every decimal
    if (fraction[digits] !== "5" || /[1-9]/.test(fraction.slice(digits + 1))) return rounded;
    const kept = digits ? `${whole}.${fraction.slice(0, digits)}` : whole;
    return Number(kept.slice(-1)) % 2 ? rounded : (value < 0 ? "-" : "") + kept;
  }

  // A canonical value in the unit its field was typed in, with that unit as a screen writes it (2200.0 psi).
  function inUnit(value, name, unit, digits) {
    const spec = rules.fields[name];
    const [factor, offset] = spec.units[unit] || [1, 0];
    return `${fixed((value - offset) / factor, digits)} ${(spec.shown_units || {})[unit] || spec.canonical_unit}`;
  }

  // --- the site's clock: the form's times are the site's wall-clock time (data-time-zone), as on the server ----
  const zone = (form && form.dataset.timeZone) || "UTC";
  const wallFormat = new Intl.DateTimeFormat("en-CA", {timeZone: zone, hourCycle: "h23", year: "numeric",
    month: "2-digit", day: "2-digit", hour: "2-digit", minute: "2-digit"});

  function pad(n) { return String(n).padStart(2, "0"); }

  function wallOf(date) {  // "YYYY-MM-DDTHH:MM" on the site's clock
    const p = Object.fromEntries(wallFormat.formatToParts(date).map((part) => [part.type, part.value]));
    return `${p.year}-${p.month}-${p.day}T${pad(Number(p.hour) % 24)}:${p.minute}`;
  }

  function stamp(date) { return wallOf(date).replace("T", " "); }

  // The site's offset from UTC at ``date`` as the server writes it: "+01:00", "-06:00", "+05:30".
  function offsetText(date) {
    const minute = Math.floor(date.getTime() / 60000) * 60000;
    const minutes = Math.round((Date.parse(wallOf(new Date(minute)) + ":00Z") - minute) / 60000);
    const whole = Math.abs(minutes);
    return `${minutes < 0 ? "-" : "+"}${pad(Math.floor(whole / 60))}:${pad(whole % 60)}`;
  }

  // The moment a wall-clock text names, or why there is none: clocks skip it (spring) or pass it twice
  // (autumn); the server refuses both too, so the device asks at once.
  function utcOf(text) {
    if (!/^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}$/.test(text)) return {date: null};
    const asUtc = new Date(text + ":00Z");
    if (Number.isNaN(asUtc.getTime())) return {date: null};
    const hour = 3600 * 1000;
    const found = [];  // every offset in use on Earth (UTC-12:00 to UTC+14:00) in quarter hours
    for (let quarter = -48; quarter <= 56; quarter++) {
      const candidate = new Date(asUtc.getTime() - quarter * hour / 4);
      if (wallOf(candidate) === text) found.push(candidate);
    }
    const moments = [...new Set(found.map((d) => d.getTime()))].sort((a, b) => a - b);
    if (!moments.length) return {date: null, reason: `${text.replace("T", " ")} does not exist in ${zone}: the ` +
      "clocks skip it (daylight saving)"};
    if (moments[moments.length - 1] - moments[0] >= hour / 2) return {date: null, reason: `${text.replace("T", " ")} ` +
      `happens twice in ${zone} (the clocks go back): enter it when the connection is back, with its offset`};
    return {date: new Date(moments[0])};
  }

  function check(values, pumpRules) {
    const problems = [];
    const doubts = [];
    const canonical = {};
    const now = new Date();
    const moment = utcOf(values.taken_at);
    const at = moment.date;
    if (!values.taken_at) problems.push({field: "taken_at", reason: "a value is required"});
    else if (!at) problems.push({field: "taken_at", reason: moment.reason || `'${values.taken_at}' is not a date`});
    else if (at - now > rules.future_tolerance_s * 1000) {
      problems.push({field: "taken_at", reason: `${stamp(at)} is in the future`});
    }
    for (const name of pumpRules.fields) {
      const spec = rules.fields[name];
      const typed = values[name];
      const number = readNumber(typed.text, form);
      if (number === null) {
        if (spec.required) problems.push({field: name, reason: "a value is required"});
        continue;
      }
      if (Number.isNaN(number)) {
        problems.push({field: name, reason: `'${typed.text.trim()}' is not a number`});
        continue;
      }
      const [factor, offset] = spec.units[typed.unit] || [1, 0];
      const value = factor * number + offset;
      const bound = (limit) => (factor === 1 && offset === 0) ? `${shown(limit)} ${spec.canonical_unit}`.trim()
        : `${shown((limit - offset) / factor)} ${(spec.shown_units || {})[typed.unit] || typed.unit}`;
      let ok = true;
      if (spec.positive && value <= 0) { problems.push({field: name, reason: `${typed.text.trim()} must be above zero`}); ok = false; }
      if (spec.min !== null && value < spec.min - 1e-9) {
        problems.push({field: name, reason: `${typed.text.trim()} is below the lowest allowed value (${bound(spec.min)})`});
        ok = false;
      }
      if (spec.max !== null && value > spec.max + 1e-9) {
        problems.push({field: name, reason: `${typed.text.trim()} is above the highest allowed value (${bound(spec.max)})`});
        ok = false;
      }
      if (ok) canonical[name] = value;
    }
    // The doubts of fleet.services.rounds.plausibility_warnings, on the values that passed, in its words, each
    // value in the unit its field was typed in.
    const unitOf = (name) => values[name].unit;
    if ("speed" in canonical && "outlet_flow" in canonical) {
      // fleet.physics.pump.theoretical_flow_lpm's own steps, in its order: the same double as the server's
      const theoretical = pumpRules.displacement_cc * canonical.speed * ("stroke" in canonical ? canonical.stroke : 1)
        / 1000;
      if (canonical.outlet_flow > theoretical) {
        const flowUnit = unitOf("outlet_flow");
        doubts.push({field: "outlet_flow", message: `${labels.outlet_flow} ` +
          `${inUnit(canonical.outlet_flow, "outlet_flow", flowUnit, 1)} is above the theoretical ` +
          `${inUnit(theoretical, "outlet_flow", flowUnit, 1)} at ${fixed(canonical.speed, 0)} rpm: a pump cannot ` +
          "deliver more than its displacement."});
      }
    }
    if ("outlet_pressure" in canonical && canonical.outlet_pressure > pumpRules.rated_pressure_bar) {
      const pressureUnit = unitOf("outlet_pressure");
      doubts.push({field: "outlet_pressure", message: `${labels.outlet_pressure} ` +
        `${inUnit(canonical.outlet_pressure, "outlet_pressure", pressureUnit, 1)} is above the rated ` +
        `${inUnit(pumpRules.rated_pressure_bar, "outlet_pressure", pressureUnit, 0)}.`,
      caution: rules.over_pressure_caution});
    }
    if ("oil_temp" in canonical) {
      const t = canonical.oil_temp;
      if (t < pumpRules.oil_temp_min_c || t > pumpRules.oil_temp_max_c) {
        const tempUnit = unitOf("oil_temp");
        doubts.push({field: "oil_temp", message: `${labels.oil_temp} ${inUnit(t, "oil_temp", tempUnit, 1)} is ` +
          `outside this pump's limits (${inUnit(pumpRules.oil_temp_min_c, "oil_temp", tempUnit, 0).split(" ")[0]}` +
          `–${inUnit(pumpRules.oil_temp_max_c, "oil_temp", tempUnit, 0)}).`,
        caution: t > pumpRules.oil_temp_max_c ? rules.hot_oil_caution : null});
      }
    }
    // The hour meter against the last reading (fleet/io/meter.py: the same rule and allowance, sent as data).
    const lastAt = pumpRules.last_taken_at ? new Date(pumpRules.last_taken_at) : null;
    if ("hours" in canonical && pumpRules.last_hours !== null && lastAt) {
      const clockH = at ? Math.max((at - lastAt) / 3600000, 0) : null;
      if (canonical.hours < pumpRules.last_hours) {
        doubts.push({field: "hours", message: `Running hours ${fixed(canonical.hours, 0)} h are below the last ` +
          `reading's ${fixed(pumpRules.last_hours, 0)} h (${stamp(lastAt).slice(0, 10)}): look again. Is it the ` +
          "right pump, or a new hour meter?"});
      } else if (clockH !== null && canonical.hours > pumpRules.last_hours
                 + clockH * (1 + rules.meter.allowance_fraction) + rules.meter.allowance_h) {
        doubts.push({field: "hours", message: `Running hours advanced ${fixed(canonical.hours - pumpRules.last_hours,
          0)} h in ${fixed(clockH, 1)} h of clock time since the last reading (${stamp(lastAt)}, ` +
          `${fixed(pumpRules.last_hours, 0)} h): look again. Is it the right pump, a slip of the finger, or the time?`});
      }
    }
    if (at && at > now && !problems.some((p) => p.field === "taken_at")) {  // a refused time is not asked about too
      doubts.push({field: "taken_at", message: `${labels.taken_at} ${stamp(at)} is later than now (${stamp(now)}, ` +
        `UTC${offsetText(now)}).`});
    }
    return {problems, doubts};
  }

  // --- showing a check's outcome, every problem at once ----------------------------------------------------
  function element(tag, text, attributes) {
    const node = document.createElement(tag);
    if (text) node.textContent = text;
    Object.entries(attributes || {}).forEach(([key, value]) => node.setAttribute(key, value));
    return node;
  }

  function showOutcome(outcome, action) {
    const box = document.getElementById("device-check");
    box.replaceChildren();
    form.querySelectorAll(".device-note").forEach((note) => note.remove());
    form.querySelectorAll(".field").forEach((f) => f.classList.remove("has-error", "has-doubt"));
    const mark = (field, text, kind) => {
      const input = document.getElementById(`f-${field}`);
      if (!input) return;
      const holder = input.closest(".field");
      holder.classList.add(kind);
      holder.appendChild(element("p", text, {class: "field-note device-note"}));
    };
    if (outcome.problems.length) {
      const notice = element("div", null, {class: "notice notice-error", role: "alert", id: "device-errors"});
      notice.appendChild(element("p", "Not kept. Please correct:"));
      const list = element("ul");
      outcome.problems.forEach((p) => {
        const item = element("li");
        if (labelOf(p.field)) {  // under the form's label, linked to the field, as the server's page lists it
          item.append(element("a", labelOf(p.field), {href: `#f-${p.field}`}), `: ${p.reason}`);
        } else {
          item.textContent = p.reason;
        }
        list.appendChild(item);
        mark(p.field, p.reason, "has-error");
      });
      notice.appendChild(list);
      box.appendChild(notice);
    }
    if (outcome.doubts.length) {
      const notice = element("div", null, {class: "notice notice-doubt", role: "alert", id: "device-doubts"});
      notice.appendChild(element("p", "Please look again before saving. These values are possible but unusual:"));
      const list = element("ul");
      outcome.doubts.forEach((d) => { list.appendChild(element("li", d.message)); mark(d.field, d.message, "has-doubt"); });
      notice.appendChild(list);
      new Set(outcome.doubts.map((d) => d.caution).filter(Boolean)).forEach((caution) => {
        notice.appendChild(element("p", `Caution: ${caution}`, {class: "caution-line", role: "note"}));
      });
      box.appendChild(notice);
    }
    if (!outcome.problems.length && !outcome.doubts.length && action === "check") {
      box.appendChild(element("p", "All values look plausible. Nothing kept yet.", {class: "notice", role: "status"}));
    }
    const confirm = form.querySelector("[data-offline-confirm]");
    if (confirm) confirm.hidden = !(outcome.doubts.length && !outcome.problems.length);
  }

  // --- keeping a reading here -----------------------------------------------------------------------------
  function typedValues(pumpRules) {
    const values = {taken_at: form.elements.taken_at.value.trim()};
    for (const name of pumpRules.fields) {
      const unitInput = form.elements[`${name}_unit`];
      values[name] = {text: form.elements[name].value, unit: unitInput ? unitInput.value : "%"};
    }
    return values;
  }

  function postedBody(values, pumpRules) {
    const body = {pump: form.dataset.pump, taken_at: values.taken_at.replace("T", " "),
      place: JSON.parse(form.dataset.place)};
    for (const name of pumpRules.fields) {
      const number = readNumber(values[name].text, form);
      if (number !== null) body[name] = {value: number, unit: values[name].unit};
    }
    const note = form.elements.note.value.trim();
    const takenBy = form.elements.taken_by.value.trim();
    if (note) body.note = note;
    if (takenBy) body.taken_by = takenBy;
    return body;
  }

  function keepOffline(action) {
    const pumpRules = rules && rules.pumps[form.dataset.pump];
    if (!pumpRules) {
      showOutcome({problems: [{field: "", reason: "this route's rules are not kept on this device: open " +
        "the route once with signal"}], doubts: []}, action);
      return;
    }
    // A reading of this pump still waiting here is its latest: the hour meter is compared with it too.
    allKept().then((records) => {
      const latest = {...pumpRules};
      records.filter((r) => r.pump === form.dataset.pump && r.state === "waiting" && r.body.hours
                     && r.body.hours.unit === "h" && (latest.last_hours === null || r.body.hours.value > latest.last_hours))
        .forEach((r) => {
          const kept = utcOf(r.body.taken_at.replace(" ", "T")).date;
          if (kept) { latest.last_hours = r.body.hours.value; latest.last_taken_at = kept.toISOString(); }
        });
      const values = typedValues(pumpRules);
      const outcome = check(values, latest);
      showOutcome(outcome, action);
      if (action === "check" || outcome.problems.length || (outcome.doubts.length && action !== "confirm")) return null;
      const record = {client_id: newId(), route: rules.route, stop: Number(form.dataset.stop), pump: form.dataset.pump,
        state: "waiting", verdict: "", kept_at: new Date().toISOString(), body: postedBody(values, pumpRules)};
      return keep(record).then(() => { window.location.href = form.dataset.nextUrl; });
    });
  }

  // --- sending what waits ---------------------------------------------------------------------------------
  function verdictOf(status, data) {
    if (status === 201) return ["stored", "stored"];
    if (status === 200 && data.repeat) return ["stored", "stored (it had reached the server before)"];
    const reasons = (data.problems || []).map((p) => (p.column ? `${labelOf(p.column) || p.column.replace(/_/g, " ")}: ` : "") + p.reason);
    return ["refused", `refused by the server: ${reasons.join("; ") || `answer ${status}`}`];
  }

  // Whether the server answers now (the session's page is never answered from this device's copy).
  async function reachable() {
    try {
      await fetch(app.dataset.sessionUrl, {credentials: "same-origin", cache: "no-store"});
      return true;
    } catch (lost) {
      return false;
    }
  }

  async function sendWaiting() {
    if (sending || !navigator.onLine) return;
    sending = true;
    try {
      const waiting = (await allKept()).filter((r) => r.state === "waiting");
      if (!waiting.length) return;
      let answer;
      try {
        answer = await fetch(app.dataset.sessionUrl, {credentials: "same-origin", cache: "no-store"});
      } catch (lost) {
        return;  // no answer from the server yet (navigator.onLine can say otherwise): the next try comes
      }
      if (!answer.ok || answer.redirected) {
        showQueueNote("Sign in again to send the readings waiting here; they stay on this device.");
        return;
      }
      const who = await answer.json();
      for (const record of waiting) {
        const body = {...record.body, client_id: record.client_id};
        if (!body.taken_by) body.taken_by = who.user;
        let response;
        try {
          response = await fetch(app.dataset.apiUrl, {method: "POST", credentials: "same-origin",
            headers: {"Content-Type": "application/json", "X-CSRFToken": who.csrf_token}, body: JSON.stringify(body)});
        } catch (lost) {
          break;  // the signal went again: the rest wait for the next try
        }
        if (response.status === 401 || response.status === 403 || response.status >= 500) {
          showQueueNote(`The server did not take the readings (answer ${response.status}); they wait here.`);
          break;
        }
        const [state, verdict] = verdictOf(response.status, await response.json().catch(() => ({})));
        await keep({...record, state, verdict, sent_at: new Date().toISOString()});
        await showQueue();
      }
    } finally {
      sending = false;
      await showQueue();
    }
  }

  function showQueueNote(text) {
    const note = document.getElementById("device-queue-note");
    if (note) note.textContent = text;
  }

  const STATE_WORDS = {waiting: "waiting to send", stored: "sent", refused: "not stored"};

  async function showQueue() {
    const section = document.getElementById("device-queue");
    if (!section) return;
    const records = (await allKept()).filter((r) => !rules || r.route === rules.route || !rules.route)
      .sort((a, b) => a.kept_at.localeCompare(b.kept_at));
    const list = section.querySelector("ol");
    list.replaceChildren();
    for (const record of records) {
      const item = element("li", null, {"data-state": record.state, "data-client-id": record.client_id});
      item.appendChild(element("strong", `${record.pump} · ${record.body.taken_at}`));
      item.appendChild(element("span", ` · ${STATE_WORDS[record.state]}`, {class: "queue-state"}));
      if (record.verdict && record.verdict !== "stored") item.appendChild(element("span", ` · ${record.verdict}`));
      if (record.state !== "waiting") {
        const drop = element("button", "Remove from this list", {type: "button", class: "quiet"});
        drop.addEventListener("click", () => forget(record.client_id).then(showQueue));
        item.appendChild(drop);
      }
      list.appendChild(item);
    }
    section.hidden = records.length === 0;
  }

  // --- keeping this route's pages while there is signal ---------------------------------------------------
  function keepPages() {
    if (!("serviceWorker" in navigator)) return;
    navigator.serviceWorker.register(app.dataset.workerUrl, {scope: app.dataset.scope}).catch(() => null);
    if (!navigator.onLine) return;
    const urls = JSON.parse(app.dataset.keep || "[]");
    navigator.serviceWorker.ready.then((registration) => {
      const channel = new MessageChannel();
      channel.port1.onmessage = (event) => {
        app.dataset.kept = String(event.data.kept);
        const status = document.getElementById("device-kept");
        if (status && event.data.kept === event.data.asked) {
          status.textContent = app.dataset.keptWords;
        }
      };
      registration.active.postMessage({keep: urls}, [channel.port2]);
    });
  }

  // --- start ------------------------------------------------------------------------------------------------
  keepPages();
  if (app.dataset.rulesUrl) {
    fetch(app.dataset.rulesUrl, {credentials: "same-origin"}).then((r) => (r.ok && !r.redirected ? r.json() : null))
      .then((data) => { rules = data; return showQueue(); }).then(sendWaiting).catch(() => showQueue());
  } else {
    showQueue().then(sendWaiting);
  }
  if (form) {
    let passing = false;
    form.addEventListener("submit", (event) => {
      if (passing) return;  // the server answered just now: it checks and saves, as without script
      event.preventDefault();
      const submitter = event.submitter;
      const action = submitter ? submitter.value : "save";
      (navigator.onLine ? reachable() : Promise.resolve(false)).then((yes) => {
        if (!yes) { keepOffline(action); return; }
        passing = true;
        form.requestSubmit(submitter || undefined);
      });
    });
  }
  window.addEventListener("online", sendWaiting);
  // Also on a timer: a page that believed it had signal all along gets no 'online' event when the server answers
  // again. Every 10 s asks the server only while readings wait here.
  window.setInterval(sendWaiting, 10000);
}());

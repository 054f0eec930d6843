/* fleetsvc — the technician's bay on a tablet.

   - Draft: every field of the session form is kept in localStorage as it is typed (photos in
     IndexedDB), so a reload or a lost connection loses nothing.
   - Outbox: a submit is queued first and sent by one sender; without a connection it waits and
     goes out when the browser fires `online` (or on the next page load). Each draft carries one
     client_token (UUID) made when the draft starts, so a resend is stored once by the server.
   - Live bands: each angle is placed against its spec band as it is typed. Linear toe mirrors the
     server's analytics.core.units.toe_from_linear, θ = asin(x / D); the server converts again and
     its value is the one stored.
*/
(function () {
  "use strict";

  var script = document.getElementById("bay-script");
  var SW_URL = script ? script.dataset.sw : null;
  var CACHE = "fleetsvc-bay-v1";
  var OUTBOX_KEY = "fleetsvc.outbox";
  var DRAFT_PREFIX = "fleetsvc.draft.";
  var CORNERS = ["FL", "FR", "RL", "RR"];
  var QUANTITIES = ["toe", "camber", "caster", "sai"];
  var PHOTO_MAX = 5 * 1024 * 1024;
  var PHOTOS_PER_CHECK = 6;

  // ---------------------------------------------------------------- small helpers
  function uuid4() {
    if (window.crypto && crypto.randomUUID) return crypto.randomUUID();
    var b = crypto.getRandomValues(new Uint8Array(16));
    b[6] = (b[6] & 0x0f) | 0x40;
    b[8] = (b[8] & 0x3f) | 0x80;
    var h = Array.prototype.map.call(b, function (x) { return ("0" + x.toString(16)).slice(-2); }).join("");
    return h.slice(0, 8) + "-" + h.slice(8, 12) + "-" + h.slice(12, 16) + "-" + h.slice(16, 20) + "-" + h.slice(20);
  }
  function load(key, fallback) {
    try { var v = localStorage.getItem(key); return v ? JSON.parse(v) : fallback; } catch (e) { return fallback; }
  }
  function store(key, value) { localStorage.setItem(key, JSON.stringify(value)); }
  function csrfToken() {
    var m = document.cookie.match(/(?:^|;\s*)csrftoken=([^;]+)/);
    if (m) return decodeURIComponent(m[1]);
    var i = document.querySelector("input[name=csrfmiddlewaretoken]");
    return i ? i.value : "";
  }
  function clock(d) { return d.toLocaleTimeString([], { hour: "2-digit", minute: "2-digit", second: "2-digit" }); }
  function signed(v, digits) { return (v > 0 ? "+" : v < 0 ? "−" : "") + Math.abs(v).toFixed(digits); }

  // ---------------------------------------------------------------- photos in IndexedDB
  var photoDb = {
    _db: null,
    open: function () {
      if (this._db) return this._db;
      this._db = new Promise(function (resolve, reject) {
        var req = indexedDB.open("fleetsvc-bay", 1);
        req.onupgradeneeded = function () { req.result.createObjectStore("photos"); };
        req.onsuccess = function () { resolve(req.result); };
        req.onerror = function () { reject(req.error); };
      });
      return this._db;
    },
    _tx: function (mode, fn) {
      return this.open().then(function (db) {
        return new Promise(function (resolve, reject) {
          var tx = db.transaction("photos", mode);
          var out = fn(tx.objectStore("photos"));
          tx.oncomplete = function () { resolve(out && out.result); };
          tx.onerror = function () { reject(tx.error); };
        });
      });
    },
    get: function (key) { return this._tx("readonly", function (s) { return s.get(key); }).then(function (v) { return v || []; }); },
    put: function (key, list) { return this._tx("readwrite", function (s) { s.put(list, key); }); },
    del: function (key) { return this._tx("readwrite", function (s) { s.delete(key); }); }
  };
  function photoKey(scope, cid) { return scope + "|" + cid; }

  // ---------------------------------------------------------------- outbox (shared by every bay page)
  function outbox() { return load(OUTBOX_KEY, []); }
  function enqueue(entry) {
    var list = outbox().filter(function (e) { return e.scope !== entry.scope; });
    list.push(entry);
    store(OUTBOX_KEY, list);
  }
  function dequeue(scope) { store(OUTBOX_KEY, outbox().filter(function (e) { return e.scope !== scope; })); }

  function composeDm(d, m) {
    d = (d || "").trim(); m = (m || "").trim();
    if (!d && !m) return "";
    var negative = /^[-−]/.test(d);
    var whole = d.replace(/^[-−+]/, "") || "0";
    return (negative ? "-" : "") + whole + "°" + (m || "0") + "'";
  }

  function readingText(fields, name, mode) {
    if (mode === "dm") return composeDm(fields[name + "@d"], fields[name + "@m"]);
    return (fields[name] || "").trim();
  }

  function buildPayload(draft) {
    var f = draft.fields;
    var p = { client_token: draft.token, readings: {}, checks: [] };
    Object.keys(f).forEach(function (name) {
      if (name.indexOf("[") === -1 && name !== "angle_format") p[name] = f[name];
    });
    if (!p.measured_at) p.measured_at = draft.measuredAt;
    CORNERS.forEach(function (c) {
      var row = { toe_unit: f["readings[" + c + "].toe_unit"] || "angle" };
      QUANTITIES.forEach(function (q) {
        var name = "readings[" + c + "]." + q + "_deg";
        var mode = (q === "toe" && row.toe_unit === "mm") ? "mm" : (f.angle_format || "dec");
        row[q + "_deg"] = readingText(f, name, mode);
      });
      p.readings[c] = row;
    });
    (draft.checks || []).forEach(function (c) {
      var row = { client_token: c.token };
      Object.keys(c.fields).forEach(function (k) { row[k] = c.fields[k]; });
      p.checks.push(row);
    });
    return p;
  }

  function sendEntry(entry) {
    var draft = load(DRAFT_PREFIX + entry.scope, null);
    if (!draft) { dequeue(entry.scope); return Promise.resolve({ status: "gone" }); }
    var form = new FormData();
    form.append("payload", JSON.stringify(buildPayload(draft)));
    var photos = (draft.checks || []).map(function (c, i) {
      return photoDb.get(photoKey(entry.scope, c.cid)).then(function (list) {
        list.forEach(function (ph) { form.append("checks[" + i + "].photos", ph.blob, ph.name); });
      }).catch(function () { /* no IndexedDB: send without photos */ });
    });
    return Promise.all(photos).then(function () {
      return fetch(entry.url, {
        method: "POST", body: form, credentials: "same-origin",
        headers: { "X-CSRFToken": csrfToken(), "Accept": "application/json" }
      });
    }).then(function (resp) {
      if (resp.status === 401 || resp.status === 403) return { status: "signedout" };
      return resp.json().catch(function () { return null; }).then(function (body) {
        if (resp.ok && body && body.ok) {
          dequeue(entry.scope);
          localStorage.removeItem(DRAFT_PREFIX + entry.scope);
          (draft.checks || []).forEach(function (c) { photoDb.del(photoKey(entry.scope, c.cid)).catch(function () {}); });
          return { status: "stored", body: body };
        }
        if (resp.status === 400 || resp.status === 404) {
          dequeue(entry.scope);
          draft.queued = false;
          draft.errors = (body && body.errors) || { __all__: "refused by the server (" + resp.status + ")" };
          store(DRAFT_PREFIX + entry.scope, draft);
          return { status: "refused", body: body || { errors: draft.errors } };
        }
        return { status: "later" };
      });
    }, function () { return { status: "later" }; });
  }

  var flushing = false, flushAgain = false;
  var listeners = [];
  function onResult(fn) { listeners.push(fn); }
  function flush() {
    if (flushing) { flushAgain = true; return Promise.resolve(); }
    if (!navigator.onLine) { renderOutbox(); return Promise.resolve(); }
    flushing = true;
    var entries = outbox();
    var chain = Promise.resolve();
    entries.forEach(function (entry) {
      chain = chain.then(function () { return sendEntry(entry); }).then(function (result) {
        listeners.forEach(function (fn) { fn(entry, result); });
      });
    });
    return chain.then(function () {
      flushing = false;
      renderOutbox();
      if (flushAgain) { flushAgain = false; return flush(); }
    }, function () { flushing = false; });
  }

  function renderOutbox() {
    var box = document.getElementById("outbox-list");
    if (!box) return;
    var list = outbox();
    box.hidden = list.length === 0;
    box.innerHTML = "";
    if (!list.length) return;
    var h = document.createElement("p");
    h.innerHTML = "<strong>" + list.length + " submit" + (list.length > 1 ? "s" : "") +
      " waiting on this tablet</strong> — " + (navigator.onLine ? "sending…" : "they go out when the connection returns.");
    box.appendChild(h);
    var ul = document.createElement("ul");
    list.forEach(function (e) {
      var li = document.createElement("li");
      var a = document.createElement("a");
      a.href = e.page || "#"; a.textContent = e.label || e.scope;
      li.appendChild(a); ul.appendChild(li);
    });
    box.appendChild(ul);
  }

  // ---------------------------------------------------------------- tolerance bands
  function place(value, band) {
    var width = band.upper - band.lower;
    var lo = band.lower - width, hi = band.upper + width;
    var pos = 100 * (value - lo) / (hi - lo);
    var state = value < band.lower ? "below" : value > band.upper ? "above" : "inside";
    return { marker: Math.min(Math.max(pos, 0), 100), offscale: pos < 0 || pos > 100, state: state };
  }
  var STATE_WORDS = { inside: "inside band", below: "under band", above: "over band" };

  function parseDecimal(text) {
    text = (text || "").trim().replace("−", "-").replace(",", ".").replace(/°$/, "");
    if (!text) return null;
    if (!/^[-+]?(\d+(\.\d*)?|\.\d+)$/.test(text)) return NaN;
    return parseFloat(text);
  }

  // ---------------------------------------------------------------- the session form
  function SessionForm(form) {
    this.form = form;
    this.scope = form.dataset.scope;
    this.key = DRAFT_PREFIX + this.scope;
    this.url = form.dataset.submitUrl;
    this.diameter = parseFloat(form.dataset.diameter);
    this.bands = JSON.parse(document.getElementById("spec-bands").textContent);
    this.parts = {};
    var self = this;
    JSON.parse(document.getElementById("parts-catalogue").textContent).forEach(function (p) { self.parts[p.code] = p; });
    this.status = document.getElementById("draft-status");
    this.body = document.getElementById("form-body");
    this.checksBox = document.getElementById("checks");
    this.template = document.getElementById("check-template");
    this.draft = load(this.key, null);
    this.bind();
    if (this.draft) this.restore(this.draft);
    this.refreshAll();
  }

  SessionForm.prototype.angleFormat = function () {
    var el = this.form.querySelector("input[name=angle_format]:checked");
    return el ? el.value : "dec";
  };

  SessionForm.prototype.bind = function () {
    var self = this;
    this.form.addEventListener("input", function (e) { self.changed(e.target); });
    this.form.addEventListener("change", function (e) { self.changed(e.target); });
    this.form.addEventListener("click", function (e) {
      var sign = e.target.closest("[data-sign]");
      if (sign) { self.flipSign(sign.closest(".reading")); return; }
      var remove = e.target.closest(".remove-check");
      if (remove) { self.removeCheck(remove.closest(".check")); return; }
      var rmPhoto = e.target.closest("[data-remove-photo]");
      if (rmPhoto) { self.removePhoto(rmPhoto.closest(".check"), parseInt(rmPhoto.dataset.removePhoto, 10)); }
    });
    this.form.addEventListener("submit", function (e) { e.preventDefault(); self.submit(); });
    var add = document.getElementById("add-check");
    if (add) add.addEventListener("click", function () { self.addCheck(null); self.save(); });
    document.getElementById("discard").addEventListener("click", function () { self.discard(); });
    document.getElementById("unqueue").addEventListener("click", function () {
      dequeue(self.scope);
      self.draft.queued = false;
      store(self.key, self.draft);
      self.lock(false);
      self.say("Draft kept on this tablet · back to editing");
      renderOutbox();
    });
    onResult(function (entry, result) { if (entry.scope === self.scope) self.result(result); });
  };

  SessionForm.prototype.changed = function (target) {
    if (target.type === "file") { this.addPhotos(target.closest(".check"), target); return; }
    if (target.name === "angle_format" || /toe_unit$/.test(target.name || "")) this.refreshAll();
    if (target.name === "odometer_unit") {
      var note = this.form.querySelector("[data-miles-note]");
      if (note) note.hidden = target.value !== "mi";
    }
    if (target.dataset && target.dataset.f === "part") this.limitCorners(target.closest(".check"));
    if (target.dataset && target.dataset.f === "findings") this.exclusiveNone(target);
    var reading = target.closest(".reading");
    if (reading) this.refresh(reading);
    this.save();
  };

  SessionForm.prototype.exclusiveNone = function (box) {
    if (!box.checked) return;
    var all = box.closest(".check").querySelectorAll("[data-f=findings]");
    Array.prototype.forEach.call(all, function (other) {
      if (other === box) return;
      if (box.value === "none" || other.value === "none") other.checked = false;
    });
  };

  SessionForm.prototype.limitCorners = function (check) {
    var part = this.parts[check.querySelector("[data-f=part]").value];
    var select = check.querySelector("[data-f=corner]");
    Array.prototype.forEach.call(select.options, function (o) {
      if (!o.value) return;
      var ok = !part || (part.axle === "front") === (o.value[0] === "F");
      o.disabled = !ok; o.hidden = !ok;
      if (!ok && o.selected) select.value = "";
    });
  };

  SessionForm.prototype.mode = function (reading) {
    if (reading.dataset.q === "toe") {
      var corner = reading.closest(".corner").dataset.corner;
      var unit = this.form.querySelector("input[name='readings[" + corner + "].toe_unit']:checked");
      if (unit && unit.value === "mm") return "mm";
    }
    return this.angleFormat();
  };

  SessionForm.prototype.flipSign = function (reading) {
    var mode = this.mode(reading);
    var name = reading.dataset.name;
    var input = this.form.querySelector("input[name='" + (mode === "dm" ? name + "@d" : name) + "']");
    var v = input.value.trim();
    input.value = /^[-−]/.test(v) ? v.replace(/^[-−]/, "") : "-" + v.replace(/^\+/, "");
    input.focus();
    this.changed(input);
  };

  // value in degrees typed into one reading; null when blank, NaN when unreadable
  SessionForm.prototype.value = function (reading) {
    var mode = this.mode(reading);
    var name = reading.dataset.name;
    var get = function (n) { var el = reading.querySelector("input[name='" + n + "']"); return el ? el.value : ""; };
    if (mode === "dm") {
      var d = get(name + "@d").trim(), m = get(name + "@m").trim();
      if (!d && !m) return { deg: null };
      var neg = /^[-−]/.test(d);
      var whole = parseDecimal(d.replace(/^[-−+]/, "") || "0"), minutes = parseDecimal(m || "0");
      if (isNaN(whole) || isNaN(minutes) || minutes >= 60 || whole !== Math.floor(whole)) return { deg: NaN };
      return { deg: (neg ? -1 : 1) * (whole + minutes / 60) };
    }
    var x = parseDecimal(get(name));
    if (x === null || isNaN(x)) return { deg: x };
    if (mode === "mm") {
      if (Math.abs(x) > this.diameter) return { deg: NaN };
      return { deg: Math.asin(x / this.diameter) * 180 / Math.PI, mm: x };
    }
    return { deg: x };
  };

  SessionForm.prototype.refreshAll = function () {
    var self = this;
    var fmt = this.angleFormat();
    Array.prototype.forEach.call(this.form.querySelectorAll(".reading"), function (r) {
      var mode = self.mode(r);
      r.dataset.mode = mode === "mm" ? "mm" : fmt;
      var unit = r.querySelector("[data-unit-label]");
      if (unit) unit.textContent = mode === "mm" ? "mm" : "°";
      self.refresh(r);
    });
  };

  SessionForm.prototype.refresh = function (reading) {
    var band = this.bands[reading.dataset.bandKey];
    var mark = reading.querySelector(".band-mark");
    var text = reading.querySelector("[data-band-text]");
    var v = this.value(reading);
    var lead = [], rest = [];
    reading.classList.remove("state-inside", "state-below", "state-above", "state-bad");
    mark.hidden = true;
    if (v.deg !== null && isNaN(v.deg)) {
      reading.classList.add("state-bad");
      lead.push(this.mode(reading) === "mm" ? "cannot read this as mm (|x| ≤ D)" : "cannot read this angle yet");
    } else if (v.deg !== null) {
      lead.push(signed(v.deg, 3) + "°");
      if (v.mm !== undefined) rest.push("from " + signed(v.mm, 2) + " mm at D " + this.diameter.toFixed(1) + " mm");
      if (band) {
        var p = place(v.deg, band);
        mark.hidden = false;
        mark.style.left = p.marker.toFixed(3) + "%";
        mark.className = "band-mark state-" + p.state + (p.offscale ? " offscale" : "");
        reading.classList.add("state-" + p.state);
        lead.push(STATE_WORDS[p.state]);
      }
    }
    if (band) {
      rest.push("band " + signed(band.lower, 2) + " … " + signed(band.upper, 2) + "°");
      rest.push("source: " + band.source + (band.derived ? " (" + band.derived + ")" : ""));
    } else {
      rest.push("no spec entered");
    }
    text.textContent = "";
    if (lead.length) {
      var strong = document.createElement("strong");
      strong.textContent = lead.join(" · ");
      text.appendChild(strong);
      text.appendChild(document.createTextNode(" · "));
    }
    text.appendChild(document.createTextNode(rest.join(" · ")));
  };

  // ---- component checks
  SessionForm.prototype.addCheck = function (saved) {
    if (!this.checksBox) return null;
    var node = this.template.content.firstElementChild.cloneNode(true);
    var cid = saved ? saved.cid : uuid4().slice(0, 8);
    node.dataset.cid = cid;
    node.dataset.token = saved ? saved.token : uuid4();
    Array.prototype.forEach.call(node.querySelectorAll("[data-f]"), function (el, i) {
      if (el.type === "radio") el.name = "check-" + cid + "-" + el.dataset.f;
      if (!el.id) el.id = "check-" + cid + "-" + el.dataset.f + "-" + i;
    });
    Array.prototype.forEach.call(node.querySelectorAll(".field > label"), function (label) {
      var control = label.parentNode.querySelector("[data-f], [data-photos]");
      if (control) { if (!control.id) control.id = "check-" + cid + "-ph"; label.htmlFor = control.id; }
    });
    this.checksBox.appendChild(node);
    if (saved) {
      var f = saved.fields;
      Array.prototype.forEach.call(node.querySelectorAll("[data-f]"), function (el) {
        var v = f[el.dataset.f];
        if (el.type === "checkbox") el.checked = (v || []).indexOf(el.value) !== -1;
        else if (el.type === "radio") el.checked = v === el.value;
        else if (v !== undefined) el.value = v;
      });
      this.limitCorners(node);
      this.renderPhotos(node);
    }
    this.numberChecks();
    return node;
  };

  SessionForm.prototype.numberChecks = function () {
    if (!this.checksBox) return;
    Array.prototype.forEach.call(this.checksBox.querySelectorAll(".check"), function (c, i) {
      c.querySelector("[data-check-number]").textContent = String(i + 1);
    });
  };

  SessionForm.prototype.removeCheck = function (check) {
    photoDb.del(photoKey(this.scope, check.dataset.cid)).catch(function () {});
    check.remove();
    this.numberChecks();
    this.save();
  };

  SessionForm.prototype.addPhotos = function (check, input) {
    var self = this;
    var key = photoKey(this.scope, check.dataset.cid);
    var files = Array.prototype.slice.call(input.files || []);
    var error = check.querySelector("[data-error-for=photos]");
    photoDb.get(key).then(function (list) {
      var problems = [];
      files.forEach(function (file) {
        if (!/^image\//.test(file.type)) { problems.push(file.name + " is not an image"); return; }
        if (file.size > PHOTO_MAX) { problems.push(file.name + " is over 5 MB"); return; }
        if (list.length >= PHOTOS_PER_CHECK) { problems.push("at most 6 photos per check"); return; }
        list.push({ name: file.name, type: file.type, blob: file });
      });
      error.textContent = problems.join("; ");
      error.classList.toggle("shown", problems.length > 0);
      input.value = "";
      return photoDb.put(key, list);
    }).then(function () { self.renderPhotos(check); self.save(); }, function () {
      error.textContent = "photos cannot be kept on this tablet (no storage); they are sent only if you submit now";
      error.classList.add("shown");
    });
  };

  SessionForm.prototype.removePhoto = function (check, index) {
    var self = this;
    var key = photoKey(this.scope, check.dataset.cid);
    photoDb.get(key).then(function (list) { list.splice(index, 1); return photoDb.put(key, list); })
      .then(function () { self.renderPhotos(check); });
  };

  SessionForm.prototype.renderPhotos = function (check) {
    var ul = check.querySelector("[data-photo-list]");
    photoDb.get(photoKey(this.scope, check.dataset.cid)).then(function (list) {
      ul.innerHTML = "";
      list.forEach(function (ph, i) {
        var li = document.createElement("li");
        var span = document.createElement("span");
        var size = ph.blob.size >= 1e5 ? (ph.blob.size / 1e6).toFixed(1) + " MB" : Math.max(1, Math.round(ph.blob.size / 1e3)) + " kB";
        span.textContent = ph.name + " · " + size;
        var rm = document.createElement("button");
        rm.type = "button"; rm.className = "button quiet small"; rm.textContent = "Remove";
        rm.dataset.removePhoto = String(i);
        li.appendChild(span); li.appendChild(rm); ul.appendChild(li);
      });
    }).catch(function () {});
  };

  // ---- draft
  SessionForm.prototype.collect = function () {
    var fields = {};
    Array.prototype.forEach.call(this.form.elements, function (el) {
      if (!el.name || el.name === "csrfmiddlewaretoken" || el.closest(".check")) return;
      if (el.type === "radio" || el.type === "checkbox") { if (el.checked) fields[el.name] = el.value; return; }
      if (el.type === "file" || el.type === "submit" || el.type === "button") return;
      fields[el.name] = el.value;
    });
    var checks = [];
    if (this.checksBox) {
      Array.prototype.forEach.call(this.checksBox.querySelectorAll(".check"), function (node) {
        var f = { findings: [] };
        Array.prototype.forEach.call(node.querySelectorAll("[data-f]"), function (el) {
          var k = el.dataset.f;
          if (el.type === "checkbox") { if (el.checked) f[k].push(el.value); return; }
          if (el.type === "radio") { if (el.checked) f[k] = el.value; return; }
          f[k] = el.value;
        });
        checks.push({ cid: node.dataset.cid, token: node.dataset.token, fields: f });
      });
    }
    return { fields: fields, checks: checks };
  };

  SessionForm.prototype.save = function () {
    if (this.draft && this.draft.queued) return this.draft;
    var now = this.collect();
    var draft = this.draft || { token: uuid4(), scope: this.scope, queued: false, startedAt: new Date().toISOString() };
    draft.fields = now.fields;
    draft.checks = now.checks;
    draft.savedAt = new Date().toISOString();
    this.draft = draft;
    try {
      store(this.key, draft);
      this.say("Draft kept on this tablet · " + clock(new Date()));
    } catch (e) {
      this.say("This tablet's storage is full: the draft is not being kept");
    }
    return draft;
  };

  SessionForm.prototype.restore = function (draft) {
    var self = this;
    var f = draft.fields || {};
    Array.prototype.forEach.call(this.form.elements, function (el) {
      if (!el.name || el.name === "csrfmiddlewaretoken" || el.closest(".check") || el.type === "file") return;
      if (el.type === "radio" || el.type === "checkbox") { el.checked = f[el.name] === el.value; return; }
      if (f[el.name] !== undefined) el.value = f[el.name];
    });
    (draft.checks || []).forEach(function (c) { self.addCheck(c); });
    var unit = this.form.querySelector("input[name=odometer_unit]:checked");
    var note = this.form.querySelector("[data-miles-note]");
    if (note && unit) note.hidden = unit.value !== "mi";
    this.say("Draft restored from this tablet · kept " + clock(new Date(draft.savedAt || Date.now())));
    if (draft.errors) this.showErrors(draft.errors);
    if (draft.queued) { this.lock(true); this.showQueued(); }
  };

  SessionForm.prototype.discard = function () {
    if (!window.confirm("Discard this draft and its photos from the tablet?")) return;
    var self = this;
    dequeue(this.scope);
    (this.draft && this.draft.checks || []).forEach(function (c) { photoDb.del(photoKey(self.scope, c.cid)).catch(function () {}); });
    localStorage.removeItem(this.key);
    window.location.reload();
  };

  SessionForm.prototype.say = function (text) { if (this.status) this.status.textContent = text; };

  SessionForm.prototype.lock = function (on) {
    var send = document.getElementById("send");
    if (!send.dataset.label) send.dataset.label = send.textContent;
    this.body.disabled = on;
    send.disabled = on;
    send.textContent = on ? "Kept on this tablet — goes out when connected" : send.dataset.label;
    document.getElementById("queued-banner").hidden = !on;
    this.form.classList.toggle("is-queued", on);
  };
  SessionForm.prototype.showQueued = function () {
    this.say(navigator.onLine ? "Sending…" : "Waiting for a connection · kept on this tablet");
  };

  // ---- errors beside their fields
  SessionForm.prototype.clearErrors = function () {
    Array.prototype.forEach.call(this.form.querySelectorAll(".field-error"), function (el) {
      el.textContent = ""; el.classList.remove("shown");
    });
    Array.prototype.forEach.call(this.form.querySelectorAll("[aria-invalid]"), function (el) { el.removeAttribute("aria-invalid"); });
  };

  SessionForm.prototype.slotFor = function (key) {
    var m = /^checks\[(\d+)\]\.?(.*)$/.exec(key);
    var root = this.form, field = key;
    if (m) {
      root = this.checksBox && this.checksBox.querySelectorAll(".check")[parseInt(m[1], 10)];
      field = m[2] || "part";
      if (!root) return null;
    }
    var slots = root.querySelectorAll("[data-error-for]");
    for (var i = 0; i < slots.length; i++) {
      if (slots[i].dataset.errorFor === field && (m || !slots[i].closest(".check"))) return slots[i];
    }
    return null;
  };

  SessionForm.prototype.showErrors = function (errors) {
    var self = this, first = null;
    this.clearErrors();
    var general = this.form.querySelector("[data-error-for=__all__]");
    var leftovers = [];
    Object.keys(errors).forEach(function (key) {
      var slot = self.slotFor(key);
      if (!slot) { leftovers.push(key + ": " + errors[key]); return; }
      slot.textContent = errors[key];
      slot.classList.add("shown");
      var holder = slot.closest(".reading, .field, .check");
      var input = holder && holder.querySelector("input:not([type=radio]):not([type=checkbox]), select, textarea");
      if (input) input.setAttribute("aria-invalid", "true");
      if (!first) first = slot;
    });
    if (leftovers.length) {
      general.textContent = leftovers.join(" · ");
      general.classList.add("shown");
      first = first || general;
    }
    if (first) first.scrollIntoView({ block: "center", behavior: "smooth" });
  };

  // ---- submit
  SessionForm.prototype.submit = function () {
    this.clearErrors();
    var draft = this.save();
    draft.measuredAt = draft.measuredAt || new Date().toISOString();
    draft.queued = true;
    delete draft.errors;
    store(this.key, draft);
    enqueue({ scope: this.scope, url: this.url, page: window.location.pathname, label: document.title, queuedAt: new Date().toISOString() });
    this.lock(true);
    this.showQueued();
    document.getElementById("queued-banner").scrollIntoView({ block: "center" });
    flush();
  };

  SessionForm.prototype.result = function (result) {
    if (result.status === "stored") {
      this.say("Stored as session " + result.body.session_id + " · opening it…");
      document.getElementById("queued-banner").hidden = true;
      this.draft = null;
      window.location.assign(result.body.url);
    } else if (result.status === "refused") {
      this.draft = load(this.key, this.draft);
      this.lock(false);
      this.say("Not stored — see the marked fields");
      this.showErrors((result.body && result.body.errors) || {});
    } else if (result.status === "signedout") {
      this.say("Signed out — sign in again in a new tab; this submit stays on the tablet");
      var general = this.form.querySelector("[data-error-for=__all__]");
      general.innerHTML = "You are signed out. <a href='/signin/?next=" + encodeURIComponent(location.pathname) +
        "' target='_blank' rel='noopener'>Sign in again</a>; the submit goes out by itself afterwards.";
      general.classList.add("shown");
    } else if (result.status === "later") {
      this.showQueued();
    }
  };

  // ---------------------------------------------------------------- page start
  function cacheForOffline() {
    if (!("serviceWorker" in navigator) || !SW_URL) return;
    navigator.serviceWorker.register(SW_URL, { scope: "/bay/" }).then(function () {
      return navigator.serviceWorker.ready;
    }).then(function () {
      var urls = [window.location.href];
      Array.prototype.forEach.call(document.querySelectorAll("link[rel=stylesheet], script[src]"), function (el) {
        urls.push(el.href || el.src);
      });
      return caches.open(CACHE).then(function (cache) { return cache.addAll(urls); });
    }).then(function () { document.body.dataset.offlineReady = "yes"; }, function () {
      document.body.dataset.offlineReady = "no";
    });
  }

  function forgetPagesOnSignout() {
    var form = document.querySelector("form[data-signout]");
    if (!form || !window.caches) return;
    form.addEventListener("submit", function (e) {
      e.preventDefault();
      caches.delete(CACHE).then(function () { form.submit(); }, function () { form.submit(); });
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    var form = document.getElementById("session-form");
    if (form) window.bayForm = new SessionForm(form);
    renderOutbox();
    forgetPagesOnSignout();
    cacheForOffline();
    window.addEventListener("online", function () { flush(); });
    window.addEventListener("offline", function () { renderOutbox(); });
    setInterval(function () { if (outbox().length) flush(); }, 30000);
    flush();
  });
})();

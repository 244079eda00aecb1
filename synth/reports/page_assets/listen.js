(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("page-data").textContent);
  var players = Array.prototype.slice.call(document.querySelectorAll("audio"));
  var volume = document.getElementById("volume");
  var volumeOut = document.getElementById("volume-out");
  var stopAt = new Map();

  function setVolume(v) {
    players.forEach(function (a) { a.volume = v; });
    volumeOut.textContent = Math.round(v * 100) + " %";
  }
  volume.value = String(data.volume);
  setVolume(data.volume);
  volume.addEventListener("input", function () { setVolume(Number(volume.value)); });

  // One player at a time; a part played alone stops at its end.
  players.forEach(function (a) {
    a.volume = data.volume;
    a.addEventListener("play", function () {
      players.forEach(function (b) { if (b !== a) { b.pause(); } });
    });
    a.addEventListener("timeupdate", function () {
      var end = stopAt.get(a);
      if (end !== undefined && a.currentTime >= end) { a.pause(); stopAt.delete(a); }
    });
    a.addEventListener("seeking", function () {
      if (!a.dataset.partSeek) { stopAt.delete(a); }
      delete a.dataset.partSeek;
    });
  });

  var starts = { A: 0, B: data.partSeconds + data.gapSeconds,
                 X: 2 * (data.partSeconds + data.gapSeconds) };
  Array.prototype.forEach.call(document.querySelectorAll("button[data-part]"), function (btn) {
    var audio = document.getElementById("trial-audio-" + btn.dataset.trial);
    btn.setAttribute("aria-label", btn.textContent + " of trial " + btn.dataset.trial);
    btn.addEventListener("click", function () {
      var start = starts[btn.dataset.part];
      audio.dataset.partSeek = "1";
      audio.currentTime = start;
      stopAt.set(audio, start + data.partSeconds);
      var p = audio.play();
      if (p && p.catch) { p.catch(function () {}); }
    });
  });

  if (!data.trials) { return; }
  var answers = new Array(data.trials).fill(null);
  try {
    var kept = JSON.parse(window.localStorage.getItem(data.storageKey) || "null");
    if (kept && Array.isArray(kept.answers) && kept.answers.length === data.trials) {
      answers = kept.answers.map(function (a) { return a === "A" || a === "B" ? a : null; });
    }
  } catch (e) { /* storage refused: answers live only while the page is open */ }

  var progress = document.getElementById("progress");
  function show() {
    var n = 0;
    for (var k = 1; k <= data.trials; k++) {
      var a = answers[k - 1];
      var set = document.getElementById("trial-" + k);
      Array.prototype.forEach.call(set.querySelectorAll("input[type=radio]"), function (r) {
        r.checked = r.value === a;
      });
      set.classList.toggle("done", a !== null);
      if (a !== null) { n += 1; }
    }
    progress.textContent = "Answered " + n + " of " + data.trials + " trials.";
  }
  function keep() {
    try {
      window.localStorage.setItem(data.storageKey, JSON.stringify({ answers: answers }));
    } catch (e) { /* see above */ }
  }
  Array.prototype.forEach.call(document.querySelectorAll("fieldset.trial input[type=radio]"),
    function (r) {
      r.addEventListener("change", function () {
        var k = Number(r.closest("fieldset").dataset.trial);
        answers[k - 1] = r.value;
        keep();
        show();
      });
    });

  document.getElementById("save").addEventListener("click", function () {
    var record = { format: data.format, version: 1, run: data.run, trials: data.trials,
                   answers: answers, saved: new Date().toISOString() };
    var blob = new Blob([JSON.stringify(record, null, 2) + "\n"], { type: "application/json" });
    var link = document.createElement("a");
    link.href = URL.createObjectURL(blob);
    link.download = "answers-" + (data.run || "blind") + ".json";
    document.body.appendChild(link);
    link.click();
    document.body.removeChild(link);
    var open = answers.filter(function (a) { return a === null; }).length;
    progress.textContent = open ? "Saved; " + open + " trials are still open."
                                : "Saved all " + data.trials + " answers.";
  });
  document.getElementById("clear").addEventListener("click", function () {
    answers = new Array(data.trials).fill(null);
    keep();
    show();
  });
  show();
}());
